//! Stage two: from the raw file to `Settings`, checking everything and
//! collecting every problem with its key path and line.

use std::fmt;
use std::ops::Range;
use std::path::PathBuf;

use toml::Spanned;

use crate::bounded::PushWithin;
use crate::ids::{unresolved, IdVec};
use crate::words::Word;
use heapless::Vec as HVec;

use super::raw::*;
use super::*;
use crate::monitor::alarm::{AlarmKind, AlarmSpec, Priority, MAX_SHELVE_MIN};
use crate::monitor::command::Action;
use crate::physics::material::{Material, Property, MAX_POLYNOMIAL_TERMS};
use crate::protocol::line::MAX_INPUT;

/// A DNS name (labels of letters, digits, `-` and `_`, none starting or
/// ending with `-`, at most 253 characters; no wildcard) or an IP address:
/// what a TLS client can check a certificate against.
fn is_server_name(s: &str) -> bool {
    if s.parse::<std::net::IpAddr>().is_ok() {
        return true;
    }
    let name = s.strip_suffix('.').unwrap_or(s);
    !name.is_empty()
        && name.len() <= 253
        && name.split('.').all(|l| {
            (1..=63).contains(&l.len())
                && !l.starts_with('-')
                && !l.ends_with('-')
                && l.chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
        })
        // All digits and dots is a mistyped address, not a name.
        && !name.split('.').all(|l| l.chars().all(|c| c.is_ascii_digit()))
}

/// A built-in alarm (no baseline; its operator texts given).
fn builtin(
    name: String,
    target: AlarmTarget,
    spec: AlarmSpec,
    message: String,
    consequence: &str,
    action: &str,
) -> AlarmConfig {
    AlarmConfig {
        name,
        target,
        spec,
        baseline: None,
        builtin: true,
        message,
        consequence: consequence.to_string(),
        action: action.to_string(),
    }
}

/// Default shell touch limit, °C: a common personnel-protection target (ASTM
/// C1055 guides the design of heated surfaces for contact and fixes no
/// value; ISO 13732-1 gives burn thresholds by material and contact time).
/// Local rules decide: set `[alarm_defaults] shell_touch_c`.
pub const DEFAULT_SHELL_TOUCH_C: f64 = 60.0;

/// One problem in a configuration file.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    /// 1-based line, when known.
    pub line: Option<usize>,
    /// Key path, e.g. `zone[1].probes[0].depth_mm`.
    pub path: String,
    pub message: String,
}

/// A configuration that cannot be used, with every problem found.
#[derive(Debug, Clone, PartialEq)]
pub struct ConfigError {
    pub file: String,
    pub problems: Vec<Problem>,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let n = self.problems.len();
        write!(
            f,
            "{}: {n} problem{} in the configuration",
            self.file,
            if n == 1 { "" } else { "s" }
        )?;
        for p in &self.problems {
            write!(f, "\n  {}", format_problem(&self.file, p))?;
        }
        Ok(())
    }
}

/// `file:line: key.path: message`, as every problem and warning is shown.
pub fn format_problem(file: &str, p: &Problem) -> String {
    let mut s = file.to_string();
    if let Some(line) = p.line {
        s += &format!(":{line}");
    }
    if p.path.is_empty() {
        s + &format!(": {}", p.message)
    } else {
        s + &format!(": {}: {}", p.path, p.message)
    }
}

impl std::error::Error for ConfigError {}

/// Parses and validates a configuration. `file` labels messages;
/// `state_directory_env` is `$STATE_DIRECTORY` (systemd), passed in so this
/// stays free of environment reads.
pub fn parse(
    text: &str,
    file: &str,
    state_directory_env: Option<&str>,
) -> Result<Settings, ConfigError> {
    // Every unknown key first, all of them: serde would stop at the first.
    let unknown = super::keys::unknown_keys(text);
    let raw: RawConfig = match toml::from_str(text) {
        Ok(r) => r,
        Err(e) => {
            let line = e.span().map(|s| line_of(text, s.start));
            let mut message = e.message().trim().to_string();
            // Name the culprit: quote the offending line of the file.
            if let Some(l) = line.and_then(|l| text.lines().nth(l - 1)) {
                let l = l.trim();
                if !l.is_empty() {
                    message = format!("{message}, in `{}`", truncate(l, 120));
                }
            }
            let mut problems = unknown;
            problems.push(Problem {
                line,
                path: String::new(),
                message,
            });
            return Err(ConfigError {
                file: file.to_string(),
                problems,
            });
        }
    };
    let mut v = Validator {
        text,
        problems: unknown,
        warnings: Vec::new(),
    };
    let settings = v.settings(raw, state_directory_env);
    if v.problems.is_empty() {
        if let Some(mut s) = settings {
            s.warnings = v.warnings;
            return Ok(s);
        }
    }
    Err(ConfigError {
        file: file.to_string(),
        problems: v.problems,
    })
}

/// Absolute zero, °C (ITS-90: 0 K).
const ABSOLUTE_ZERO_C: f64 = -273.15;
/// Longest delay, window or silence limit in seconds that can mean
/// anything for a kiln wall: one week.
const MAX_DELAY_S: f64 = 7.0 * 86_400.0;
/// A zone's interval, s: from 0.1 s to one day.
const INTERVAL_S: (f64, f64) = (0.1, 86_400.0);
/// A plausible total wall, mm (common practice: a thin oven panel is a few
/// centimetres, a blast-furnace hearth about two metres).
const WALL_MM: (f64, f64) = (30.0, 2000.0);
/// A layer thicker than this is no wall (refused), mm.
const MAX_LAYER_MM: f64 = 10_000.0;
/// Conductivities of refractories, insulations and a steel shell, W/(m·K):
/// from microporous and aerogel insulation (about 0.015 to 0.02, below
/// still air at 0.026, Incropera Table A.4 at 300 K, from memory) to dense
/// silicon-carbide refractories (15 to 40) and plain carbon steel (60.5 at
/// 300 K, Incropera Table A.1, from memory). Outside: a warning.
const CONDUCTIVITY_W_MK: (f64, f64) = (0.01, 70.0);
/// A shell-touch limit above this warns: EN ISO 13732-1 puts the burn
/// threshold of a 1 s touch of bare metal at about 65 to 70 °C and of a
/// 1 min touch at about 51 °C (from memory); 60 °C is common practice.
const MAX_SHELL_TOUCH_C: f64 = 70.0;

/// A number for a message: exponent form when it is huge or tiny (a
/// `1e300` in the file is not printed as 301 digits).
fn num(v: f64) -> String {
    if v != 0.0 && v.is_finite() && !(1e-4..1e9).contains(&v.abs()) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

fn touch_warning(v: f64) -> String {
    format!(
        "a shell-touch limit of {} °C is above {MAX_SHELL_TOUCH_C} °C: bare metal burns in about a second from 65 to 70 °C (EN ISO 13732-1, from memory); 60 °C is common practice",
        num(v)
    )
}

/// The values a material property takes over its range (a polynomial
/// sampled), for the plausibility warning.
fn property_values(p: &RawProperty) -> Vec<f64> {
    match p {
        RawProperty::Constant(v) => vec![*v],
        RawProperty::Table(points) => points.iter().map(|p| p[1]).collect(),
        RawProperty::Polynomial {
            coefficients,
            from_c,
            to_c,
        } => (0..=8)
            .map(|i| {
                let t = from_c + (to_c - from_c) * f64::from(i) / 8.0;
                coefficients.iter().rev().fold(0.0, |acc, a| acc * t + a)
            })
            .collect(),
    }
}

fn truncate(s: &str, max: usize) -> &str {
    match s.char_indices().nth(max) {
        Some((i, _)) => &s[..i],
        None => s,
    }
}

pub(super) fn line_of(text: &str, byte: usize) -> usize {
    let end = byte.min(text.len());
    text.as_bytes()[..end]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}

struct Validator<'t> {
    text: &'t str,
    problems: Vec<Problem>,
    /// Implausible but usable: printed by `check`, logged at start.
    warnings: Vec<Problem>,
}

impl Validator<'_> {
    fn problem(&mut self, span: Range<usize>, path: impl Into<String>, message: impl Into<String>) {
        self.problems.push(Problem {
            line: Some(line_of(self.text, span.start)),
            path: path.into(),
            message: message.into(),
        });
    }

    /// The variant of `T` whose word `s` is; else a problem that lists
    /// every word, and `default` so that validation goes on.
    /// `[commands]`: the enabled actions (each once), the senders allowed
    /// (as a command's `by` must read), the shelve and age limits.
    fn commands(&mut self, c: &RawCommands) -> CommandSettings {
        let mut out = CommandSettings::default();
        if let Some(list) = &c.enabled {
            out.enabled.clear();
            for w in list.get_ref() {
                let a = self.word(w, "commands.enabled", "a command action", Action::Ack);
                if out.enabled.contains(&a) {
                    self.problem(
                        w.span(),
                        "commands.enabled",
                        format!("{:?} is listed twice", w.get_ref()),
                    );
                }
                out.enabled.push(a);
            }
        }
        if let Some(list) = &c.allowed_by {
            if list.get_ref().is_empty() {
                self.problem(
                    list.span(),
                    "commands.allowed_by",
                    "is empty: leave it out to take commands from anyone, or list who may command",
                );
            }
            for b in list.get_ref() {
                if let Err(e) = crate::monitor::command::check_text("by", b.get_ref()) {
                    self.problem(
                        b.span(),
                        "commands.allowed_by",
                        format!("{:?}: {e}", b.get_ref()),
                    );
                }
                out.allowed_by.push(b.get_ref().clone());
            }
        }
        if let Some(m) = &c.max_shelve_min {
            out.max_shelve_min =
                self.positive_up_to(m, "commands.max_shelve_min", MAX_SHELVE_MIN, "minutes");
        }
        if let Some(a) = &c.max_command_age_s {
            out.max_age_s = self.positive_up_to(
                a,
                "commands.max_command_age_s",
                MAX_COMMAND_AGE_S,
                "seconds",
            );
        }
        out
    }

    /// `[store]`: the spool's bounds and the history's length.
    fn store(&mut self, c: &RawStore) -> StoreSettings {
        let mut out = StoreSettings::default();
        if let Some(v) = &c.spool_max_mb {
            out.spool_max_mb = self.positive_up_to(v, "store.spool_max_mb", 65_536.0, "MB");
            if out.spool_max_mb < 0.01 {
                self.problem(v.span(), "store.spool_max_mb", "must be at least 0.01 MB");
            }
        }
        if let Some(v) = &c.spool_max_age_h {
            out.spool_max_age_h =
                self.positive_up_to(v, "store.spool_max_age_h", 24.0 * 366.0, "hours");
        }
        if let Some(v) = &c.history_days {
            let d = *v.get_ref();
            if !(d.is_finite() && (0.0..=3660.0).contains(&d)) {
                self.problem(
                    v.span(),
                    "store.history_days",
                    format!("must be 0 (no history) to 3660 days, got {}", num(d)),
                );
            }
            out.history_days = d;
        }
        out
    }

    fn word<T: Word>(&mut self, s: &Spanned<String>, path: &str, what: &str, default: T) -> T {
        T::from_word(s.get_ref()).unwrap_or_else(|| {
            let message = format!("{:?} is not {what}; use {}", s.get_ref(), T::word_choices());
            self.problem(s.span(), path, message);
            default
        })
    }

    /// [`Self::word`] of an optional key, `default` when it is absent.
    fn word_or<T: Word>(
        &mut self,
        s: Option<&Spanned<String>>,
        path: &str,
        what: &str,
        default: T,
    ) -> T {
        s.map_or(default, |s| self.word(s, path, what, default))
    }

    fn name(&mut self, s: &Spanned<String>, path: &str) -> Name {
        let v = s.get_ref();
        let ok_chars = v
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
        // The conversion is the length check: a name longer than MAX_NAME
        // bytes is refused here, never cut short.
        match Name::try_from(v.as_str()) {
            Ok(n) if !v.is_empty() && ok_chars => n,
            _ => {
                self.problem(
                    s.span(),
                    path,
                    format!(
                        "{v:?} is not a valid name: use 1 to {MAX_NAME} characters of A-Z a-z 0-9 _ - (names appear in MQTT topics)"
                    ),
                );
                Name::new()
            }
        }
    }

    fn warning(&mut self, span: Range<usize>, path: impl Into<String>, message: impl Into<String>) {
        self.warnings.push(Problem {
            line: Some(line_of(self.text, span.start)),
            path: path.into(),
            message: message.into(),
        });
    }

    /// A number in `lo..=hi` (a range that can produce a number: beyond it
    /// nothing useful is computed, or a duration overflows).
    fn within(&mut self, s: &Spanned<f64>, path: &str, lo: f64, hi: f64, unit: &str) -> f64 {
        let v = *s.get_ref();
        if !(v.is_finite() && (lo..=hi).contains(&v)) {
            self.problem(
                s.span(),
                path,
                format!("must be {} to {} {unit}, got {}", num(lo), num(hi), num(v)),
            );
        }
        v
    }

    /// A positive number up to `hi`.
    fn positive_up_to(&mut self, s: &Spanned<f64>, path: &str, hi: f64, unit: &str) -> f64 {
        let v = *s.get_ref();
        if !(v.is_finite() && v > 0.0 && v <= hi) {
            self.problem(
                s.span(),
                path,
                format!(
                    "must be a positive number of {unit}, at most {}, got {}",
                    num(hi),
                    num(v)
                ),
            );
        }
        v
    }

    /// A temperature, °C: finite and not below absolute zero.
    fn celsius(&mut self, s: &Spanned<f64>, path: &str) -> f64 {
        let v = *s.get_ref();
        if !(v.is_finite() && v >= ABSOLUTE_ZERO_C) {
            self.problem(
                s.span(),
                path,
                format!(
                    "must be a temperature in °C, not below absolute zero ({ABSOLUTE_ZERO_C} °C), got {}",
                    num(v)
                ),
            );
        }
        v
    }

    fn positive(&mut self, s: &Spanned<f64>, path: &str, unit: &str) -> f64 {
        let v = *s.get_ref();
        if !(v.is_finite() && v > 0.0) {
            self.problem(
                s.span(),
                path,
                format!("must be a positive number of {unit}, got {v}"),
            );
        }
        v
    }

    fn finite(&mut self, s: &Spanned<f64>, path: &str) -> f64 {
        let v = *s.get_ref();
        if !v.is_finite() {
            self.problem(s.span(), path, format!("must be a finite number, got {v}"));
        }
        v
    }

    fn unique(&mut self, names: &[(Name, Range<usize>)], table: &str) {
        for (i, (n, span)) in names.iter().enumerate() {
            if n.is_empty() {
                continue;
            }
            if let Some(first) = names[..i].iter().position(|(m, _)| m == n) {
                self.problem(
                    span.clone(),
                    format!("{table}[{i}].name"),
                    format!("{n:?} is already the name of {table}[{first}]"),
                );
            }
        }
    }

    fn settings(&mut self, raw: RawConfig, state_env: Option<&str>) -> Option<Settings> {
        let site = {
            let s = raw.site.get_ref();
            let energy_price = match (&s.energy_price_per_kwh, &s.currency) {
                (Some(p), Some(c)) => {
                    let v = *p.get_ref();
                    if !(v.is_finite() && v >= 0.0) {
                        self.problem(
                            p.span(),
                            "site.energy_price_per_kwh",
                            "must be zero or a positive number",
                        );
                    }
                    let cur = c.get_ref().trim();
                    if cur.is_empty() || cur.len() > 8 {
                        self.problem(
                            c.span(),
                            "site.currency",
                            "must be a short currency code, e.g. \"EUR\"",
                        );
                    }
                    Some((v, cur.to_string()))
                }
                (Some(p), None) => {
                    self.problem(
                        p.span(),
                        "site.energy_price_per_kwh",
                        "needs site.currency too",
                    );
                    None
                }
                (None, Some(c)) => {
                    self.problem(
                        c.span(),
                        "site.currency",
                        "needs site.energy_price_per_kwh too",
                    );
                    None
                }
                (None, None) => None,
            };
            let firing_start_c = s
                .firing_start_c
                .as_ref()
                .map_or(150.0, |f| self.celsius(f, "site.firing_start_c"));
            let operation = self.word_or(
                s.operation.as_ref(),
                "site.operation",
                "an operation (periodic: batch firings; continuous: always hot)",
                Operation::Periodic,
            );
            Site {
                plant: self.name(&s.plant, "site.plant"),
                kiln: self.name(&s.kiln, "site.kiln"),
                energy_price,
                firing_start_c,
                operation,
            }
        };
        let state_dir = match &raw.state_dir {
            Some(d) if d.get_ref().is_empty() => {
                self.problem(d.span(), "state_dir", "must not be empty");
                PathBuf::new()
            }
            Some(d) => PathBuf::from(d.get_ref()),
            None => match state_env.and_then(|e| e.split(':').find(|p| !p.is_empty())) {
                Some(p) => PathBuf::from(p),
                None => PathBuf::from("/var/lib/wallflux"),
            },
        };
        let mqtt = self.mqtt(raw.mqtt.get_ref(), &site);
        let log = LogSettings {
            summary_every: match raw.log.as_ref().and_then(|l| l.summary_every.as_ref()) {
                Some(s) if (1..=1_000_000).contains(s.get_ref()) => *s.get_ref() as u32,
                Some(s) => {
                    self.problem(
                        s.span(),
                        "log.summary_every",
                        "must be 1 to 1000000 intervals",
                    );
                    1
                }
                None => 6,
            },
        };

        let commands = match &raw.commands {
            Some(c) => self.commands(c.get_ref()),
            None => CommandSettings::default(),
        };
        let store = match &raw.store {
            Some(c) => self.store(c.get_ref()),
            None => StoreSettings::default(),
        };

        let mut sources: IdVec<SourceId, Source> = raw
            .source
            .iter()
            .enumerate()
            .map(|(i, s)| self.source(i, s.get_ref()))
            .collect();
        let names: Vec<_> = sources
            .iter()
            .zip(&raw.source)
            .map(|(s, r)| (s.name.clone(), r.get_ref().name.span()))
            .collect();
        self.unique(&names, "source");
        if sources.is_empty() {
            self.problems.push(Problem {
                line: None,
                path: "source".into(),
                message: "at least one [[source]] is needed".into(),
            });
        }

        if raw.channel.len() > MAX_CHANNELS {
            self.problem(
                raw.channel[MAX_CHANNELS].span(),
                "channel",
                format!("at most {MAX_CHANNELS} channels are supported"),
            );
        }
        let mut channels: IdVec<ChannelId, Channel> = raw
            .channel
            .iter()
            .enumerate()
            .map(|(i, c)| self.channel(i, c.get_ref(), &sources))
            .collect();
        let names: Vec<_> = channels
            .iter()
            .zip(&raw.channel)
            .map(|(c, r)| (c.name.clone(), r.get_ref().name.span()))
            .collect();
        self.unique(&names, "channel");
        // A Modbus channel's input is its place on its source, 1..=64.
        let mut on_bus: Vec<u16> = vec![0; sources.len()];
        for (i, c) in channels.iter_mut().enumerate() {
            if c.point.is_none() {
                continue;
            }
            let n = &mut on_bus[c.source.index()];
            *n += 1;
            c.input = u8::try_from(*n).unwrap_or(0);
            if *n > MAX_INPUT as u16 {
                self.problem(
                    raw.channel[i].get_ref().name.span(),
                    format!("channel[{i}].source"),
                    format!("a Modbus source reads at most {MAX_INPUT} channels"),
                );
            }
        }
        for (i, c) in channels.iter().enumerate() {
            let Some(pt) = &c.point else { continue };
            let same = channels.as_slice()[..i].iter().position(|d| {
                d.source == c.source
                    && d.point.as_ref().is_some_and(|q| {
                        q.unit == pt.unit && q.function == pt.function && q.address == pt.address
                    })
            });
            if let Some(first) = same {
                let r = raw.channel[i].get_ref();
                self.problem(
                    r.address
                        .as_ref()
                        .map(|a| a.span())
                        .unwrap_or_else(|| r.name.span()),
                    format!("channel[{i}].address"),
                    format!(
                        "unit {} {} register {} is already read by channel[{first}] ({:?})",
                        pt.unit,
                        pt.function.name(),
                        pt.address,
                        channels.as_slice()[first].name
                    ),
                );
            }
        }
        for (i, c) in channels.iter().enumerate() {
            if c.point.is_some() {
                continue;
            }
            if let Some(first) = channels.as_slice()[..i].iter().position(|d| {
                d.source == c.source && d.input == c.input && sources.get(c.source).is_some()
            }) {
                let r = raw.channel[i].get_ref();
                self.problem(
                    r.input
                        .as_ref()
                        .map(|n| n.span())
                        .unwrap_or_else(|| r.name.span()),
                    format!("channel[{i}].input"),
                    format!(
                        "input {} of source {:?} is already read by channel[{first}] ({:?})",
                        c.input,
                        r.source.get_ref(),
                        channels.as_slice()[first].name
                    ),
                );
            }
        }

        // Cold-junction channels resolve once the channels are known.
        for (si, rs) in sources.ids().zip(&raw.source) {
            let i = si.index();
            let Some(c) = &rs.get_ref().cj_channel else {
                continue;
            };
            match channels.position(|x| x.name.as_str() == c.get_ref()) {
                Some(ci) if channels[ci].source == si && channels[ci].signal == Signal::Celsius => {
                    sources[si].cj_channel = Some(ci);
                    // Whatever its `type` says, it measures terminals: it is
                    // diagnosed as a terminal sensor (older files gave it a
                    // thermocouple letter, which meant nothing for it).
                    channels[ci].kind = ChannelKind::Terminal;
                    if let Some(f) = &rs.get_ref().cj_c {
                        self.problem(
                            f.span(),
                            format!("source[{i}].cj_c"),
                            "cj_c and cj_channel exclude each other: with a cold-junction sensor, its failure makes the millivolt channels invalid instead of a fixed value silently standing in",
                        );
                    }
                }
                Some(_) => self.problem(
                    c.span(),
                    format!("source[{i}].cj_channel"),
                    "the cold-junction channel must be a celsius channel of this same source",
                ),
                None => self.problem(
                    c.span(),
                    format!("source[{i}].cj_channel"),
                    format!("no [[channel]] is named {:?}", c.get_ref()),
                ),
            }
        }

        // A millivolt channel needs a cold junction: the frame's cj=, else
        // the source's cj_channel or cj_c. Without the last two, one frame
        // without cj= leaves it without a temperature.
        for (i, (c, rc)) in channels.iter().zip(&raw.channel).enumerate() {
            let Some(src) = sources.get(c.source) else {
                continue;
            };
            if c.signal == Signal::Millivolts && src.cj_c.is_none() && src.cj_channel.is_none() {
                let span = rc.get_ref().signal.as_ref().map_or(rc.span(), |s| s.span());
                self.warning(
                    span,
                    format!("channel[{i}].signal"),
                    format!(
                        "millivolts, but source {:?} has neither cj_channel nor cj_c: the channel reads only while every frame carries cj=; give the source its terminal sensor (cj_channel) or a fixed cj_c",
                        src.name.as_str()
                    ),
                );
            }
        }

        let materials: Vec<NamedMaterial> = raw
            .material
            .iter()
            .enumerate()
            .map(|(i, m)| self.material(i, m.get_ref()))
            .collect();
        let names: Vec<_> = materials
            .iter()
            .zip(&raw.material)
            .map(|(m, r)| (m.name.clone(), r.get_ref().name.span()))
            .collect();
        self.unique(&names, "material");

        let zones: IdVec<ZoneId, Zone> = raw
            .zone
            .iter()
            .enumerate()
            .map(|(i, z)| self.zone(i, z, &channels, &materials))
            .collect();
        let names: Vec<_> = zones
            .iter()
            .zip(&raw.zone)
            .map(|(z, r)| (z.name.clone(), r.get_ref().name.span()))
            .collect();
        self.unique(&names, "zone");
        if zones.is_empty() {
            self.problems.push(Problem {
                line: None,
                path: "zone".into(),
                message: "at least one [[zone]] is needed".into(),
            });
        }

        // A terminal sensor measures a box, not a wall.
        for (zi, (z, rz)) in zones.iter().zip(&raw.zone).enumerate() {
            let terminal = |c: ChannelId| {
                channels
                    .get(c)
                    .is_some_and(|c| c.kind == ChannelKind::Terminal)
            };
            for (pi, (pr, rp)) in z
                .probes
                .iter()
                .zip(rz.get_ref().probes.get_ref())
                .enumerate()
            {
                if terminal(pr.channel) {
                    self.problem(
                        rp.get_ref().channel.span(),
                        format!("zone[{zi}].probes[{pi}].channel"),
                        format!("{:?} is a terminal (cold-junction) sensor, not a thermocouple in the wall", channels[pr.channel].name),
                    );
                }
            }
            if let (Some(hf), Some(r)) = (z.hot_face_channel, &rz.get_ref().hot_face_channel) {
                if terminal(hf) {
                    self.problem(
                        r.span(),
                        format!("zone[{zi}].hot_face_channel"),
                        "a terminal (cold-junction) sensor cannot read the hot face",
                    );
                }
            }
        }

        let defaults = raw.alarm_defaults.as_ref().map(|d| d.get_ref());
        let trend = TrendSettings {
            horizon_h: defaults
                .and_then(|d| d.trend_horizon_h.as_ref())
                .map_or(4.0, |h| {
                    self.positive_up_to(h, "alarm_defaults.trend_horizon_h", 8760.0, "hours")
                }),
            repeat_min: defaults
                .and_then(|d| d.trend_repeat_min.as_ref())
                .map_or(30.0, |h| {
                    self.positive_up_to(
                        h,
                        "alarm_defaults.trend_repeat_min",
                        MAX_DELAY_S / 60.0,
                        "minutes",
                    )
                }),
        };
        let mut alarms = self.builtin_alarms(defaults, &sources, &channels, &materials, &zones);
        self.configured_alarms(&raw.alarm, &mut alarms, &sources, &channels, &zones);
        let alarms = alarms.into_iter().collect();

        Some(Settings {
            site,
            state_dir,
            mqtt,
            log,
            commands,
            store,
            sources,
            channels,
            materials,
            zones,
            alarms,
            trend,
            warnings: Vec::new(),
        })
    }

    /// The alarms every site gets (see docs/alarms.md for their sources).
    fn builtin_alarms(
        &mut self,
        defaults: Option<&RawAlarmDefaults>,
        sources: &IdVec<SourceId, Source>,
        channels: &IdVec<ChannelId, Channel>,
        materials: &[NamedMaterial],
        zones: &IdVec<ZoneId, Zone>,
    ) -> Vec<AlarmConfig> {
        let spec = |kind, setpoint, deadband, on_delay_s, priority| AlarmSpec {
            kind,
            setpoint,
            deadband,
            on_delay_s,
            off_delay_s: 0.0,
            latch: false,
            priority,
        };
        let mut out = Vec::new();
        let touch_c =
            defaults
                .and_then(|d| d.shell_touch_c.as_ref())
                .map_or(DEFAULT_SHELL_TOUCH_C, |t| {
                    let v = self.celsius(t, "alarm_defaults.shell_touch_c");
                    if v > MAX_SHELL_TOUCH_C {
                        self.warning(t.span(), "alarm_defaults.shell_touch_c", touch_warning(v));
                    }
                    v
                });
        let touch_on = defaults
            .and_then(|d| d.shell_touch_enabled.as_ref())
            .is_none_or(|e| *e.get_ref());
        for (zi, z) in zones.iter_ids() {
            let zone = |quantity| AlarmTarget::Zone { zone: zi, quantity };
            if touch_on {
                out.push(builtin(
                    format!("{}-shell-touch", z.name),
                    zone(ZoneQuantity::ShellC),
                    spec(AlarmKind::High, touch_c, 2.0, 60.0, Priority::High),
                    format!("Shell of zone {} is above the touch limit", z.name),
                    "Burns on contact with the shell",
                    "Keep people clear, guard or sign the area, check the insulation behind it",
                ));
            }
            if let Some(limit) = z
                .layers
                .first()
                .and_then(|l| materials.get(l.material))
                .and_then(|m| m.material.max_service_c)
            {
                out.push(builtin(
                    format!("{}-hot-face-service", z.name),
                    zone(ZoneQuantity::HotFaceC),
                    spec(AlarmKind::High, limit, 10.0, 120.0, Priority::High),
                    format!(
                        "Hot face of zone {} above the lining's service limit",
                        z.name
                    ),
                    "Lining damage: softening, shrinkage, spalling",
                    "Check the firing against the lining's limit; reduce the set-point",
                ));
            }
            if z.model != Model::Quadratic {
                for (i, next) in z.layers.iter().enumerate().skip(1) {
                    let Some(limit) = materials
                        .get(next.material)
                        .and_then(|m| m.material.max_service_c)
                    else {
                        continue;
                    };
                    let k = (i - 1) as u8;
                    out.push(builtin(format!("{}-interface-{k}-service", z.name), zone(ZoneQuantity::InterfaceC(k)), spec(AlarmKind::High, limit, 10.0, 300.0, Priority::High), format!("Interface {k} of zone {} above the service limit of the layer behind it", z.name), "The backup layer degrades: shrinkage, loss of insulation, a hotter shell", "Check the lining in front of it for wear or cracks; plan an inspection"));
                }
            }
            if z.model == Model::Layered && z.hot_face_channel.is_some() {
                out.push(builtin(format!("{}-resistance-fall", z.name), zone(ZoneQuantity::ResistanceChangePct), spec(AlarmKind::Low, -10.0, 2.0, 3600.0, Priority::Low), format!("Thermal resistance of zone {} 10 % below its commissioning baseline", z.name), "The wall insulates less: wear, cracks or wet insulation; a hotter shell follows", "Compare with the shell temperature and plan an inspection"));
            }
            if let (Some(min), true) = (z.lining_min_mm, z.hot_face_channel.is_some()) {
                out.push(builtin(
                    format!("{}-lining-thin", z.name),
                    zone(ZoneQuantity::LiningRemainingMm),
                    spec(AlarmKind::Low, min, 5.0, 3600.0, Priority::Medium),
                    format!(
                        "Hot-side lining of zone {} thinner than its minimum",
                        z.name
                    ),
                    "Hot spots, shell overheating, a burn-through if it goes on",
                    "Plan a reline or repair; watch the shell temperature",
                ));
            }
            if let Some(ramp) = z.max_ramp_c_per_h {
                out.push(builtin(
                    format!("{}-ramp", z.name),
                    zone(ZoneQuantity::HotFaceC),
                    spec(
                        AlarmKind::RateHigh,
                        ramp,
                        0.1 * ramp,
                        300.0,
                        Priority::Medium,
                    ),
                    format!(
                        "Hot face of zone {} heating or cooling faster than the ramp limit",
                        z.name
                    ),
                    "Thermal shock; in a wet lining, steam spalling",
                    "Slow the ramp to the refractory supplier's schedule",
                ));
            }
            if let Some(base) = z.heat_loss_baseline_w {
                out.push(AlarmConfig {
                    baseline: Some(base),
                    ..builtin(
                        format!("{}-heat-loss", z.name),
                        zone(ZoneQuantity::HeatLossW),
                        spec(AlarmKind::Deviation, 20.0, 2.0, 1800.0, Priority::Low),
                        format!(
                            "Heat loss of zone {} more than 20 % from its baseline",
                            z.name
                        ),
                        "Energy cost; possibly a worn or wet lining",
                        "Compare with earlier firings; plan an inspection",
                    )
                });
            }
        }
        for (ci, c) in channels.iter_ids() {
            if !zones
                .iter()
                .any(|z| z.probes.iter().any(|p| p.channel == ci))
            {
                continue;
            }
            out.push(builtin(
                format!("{}-fault", c.name),
                AlarmTarget::Channel {
                    channel: ci,
                    health: true,
                },
                spec(AlarmKind::Diagnostic, 0.5, 0.0, 30.0, Priority::Medium),
                format!(
                    "Thermocouple {} faulty (open, out of range, stuck, outlier or stale)",
                    c.name
                ),
                "The zone's numbers rest on fewer probes; alarms depending on it are suppressed",
                "Check the thermocouple, its wiring and its input",
            ));
        }
        for (si, s) in sources.iter_ids() {
            out.push(builtin(
                format!("{}-silent", s.name),
                AlarmTarget::Source { source: si },
                spec(AlarmKind::Diagnostic, 0.5, 0.0, 0.0, Priority::High),
                format!("No valid frame from {} within its silence limit", s.name),
                "No readings from its thermocouples: no numbers, no process alarms",
                "Check the serial cable, the box's power and the port",
            ));
        }
        // A Modbus unit's silence, once per unit of each bus.
        for (si, s) in sources.iter_ids() {
            let mut units: Vec<u8> = channels
                .iter()
                .filter(|c| c.source == si)
                .filter_map(|c| c.point.as_ref().map(|p| p.unit))
                .collect();
            units.sort_unstable();
            units.dedup();
            for u in units {
                out.push(builtin(
                    format!("{}-unit-{u}-silent", s.name),
                    AlarmTarget::Unit {
                        source: si,
                        unit: u,
                    },
                    spec(AlarmKind::Diagnostic, 0.5, 0.0, 0.0, Priority::High),
                    format!("Modbus unit {u} on {} not answering", s.name),
                    "Its channels get no readings; the zones on them lose those probes",
                    "Check the module's power and address, and the bus wiring to it",
                ));
            }
        }
        out.push(builtin(
            STATE_ALARM.to_string(),
            AlarmTarget::StateDir,
            spec(AlarmKind::Diagnostic, 0.5, 0.0, 0.0, Priority::High),
            "The state directory cannot be written".to_string(),
            "Alarm flags, shelves, lining baselines and energy totals will not survive a restart; commands are answered not_persisted",
            "Check the state directory: free space, permissions, the storage card",
        ));
        out
    }

    fn configured_alarms(
        &mut self,
        raw: &[Spanned<RawAlarm>],
        alarms: &mut Vec<AlarmConfig>,
        sources: &IdVec<SourceId, Source>,
        channels: &IdVec<ChannelId, Channel>,
        zones: &IdVec<ZoneId, Zone>,
    ) {
        let mut seen: Vec<String> = Vec::new();
        for (i, ra) in raw.iter().enumerate() {
            let a = ra.get_ref();
            let p = |k: &str| format!("alarm[{i}].{k}");
            let name = self.name(&a.name, &p("name")).to_string();
            if seen.contains(&name) && !name.is_empty() {
                self.problem(
                    a.name.span(),
                    p("name"),
                    format!("{name:?} is already the name of another [[alarm]]"),
                );
                continue;
            }
            seen.push(name.clone());
            let builtin = alarms.iter().position(|b| b.builtin && b.name == name);
            let kind = a
                .kind
                .as_ref()
                .map(|k| self.word(k, &p("kind"), "an alarm kind", AlarmKind::High));
            let priority = a
                .priority
                .as_ref()
                .map(|k| self.word(k, &p("priority"), "a priority", Priority::Medium));
            let mut cfg = match builtin {
                Some(b) => {
                    for (given, key) in [
                        (a.zone.is_some(), "zone"),
                        (a.channel.is_some(), "channel"),
                        (a.source.is_some(), "source"),
                        (a.quantity.is_some(), "quantity"),
                        (a.kind.is_some(), "kind"),
                    ] {
                        if given {
                            self.problem(
                                a.name.span(),
                                p(key),
                                format!("{name:?} is a built-in alarm: its {key} is fixed (tune setpoint, delays, priority, texts, or set enabled = false)"),
                            );
                        }
                    }
                    if a.enabled.as_ref().is_some_and(|e| !*e.get_ref()) {
                        alarms.remove(b);
                        continue;
                    }
                    alarms.remove(b)
                }
                None => {
                    let Some(target) = self.alarm_target(i, a, sources, channels, zones) else {
                        continue;
                    };
                    let Some(kind) = kind else {
                        self.problem(
                            a.name.span(),
                            p("kind"),
                            "an alarm needs a kind: high, low, rate_high, deviation or diagnostic",
                        );
                        continue;
                    };
                    if a.enabled.as_ref().is_some_and(|e| !*e.get_ref()) {
                        continue;
                    }
                    AlarmConfig {
                        name: name.clone(),
                        target,
                        spec: AlarmSpec {
                            kind,
                            setpoint: if kind == AlarmKind::Diagnostic {
                                0.5
                            } else {
                                f64::NAN
                            },
                            deadband: 0.0,
                            on_delay_s: 0.0,
                            off_delay_s: 0.0,
                            latch: false,
                            priority: Priority::Medium,
                        },
                        baseline: None,
                        builtin: false,
                        message: String::new(),
                        consequence: String::new(),
                        action: String::new(),
                    }
                }
            };
            if let Some(s) = &a.setpoint {
                cfg.spec.setpoint = self.finite(s, &p("setpoint"));
                if cfg.builtin
                    && cfg.name.ends_with("-shell-touch")
                    && cfg.spec.setpoint > MAX_SHELL_TOUCH_C
                {
                    self.warning(s.span(), p("setpoint"), touch_warning(cfg.spec.setpoint));
                }
            } else if cfg.spec.setpoint.is_nan() {
                self.problem(a.name.span(), p("setpoint"), "this alarm needs a setpoint");
            }
            if let Some(b) = &a.baseline {
                cfg.baseline = Some(self.positive(b, &p("baseline"), "units of the quantity"));
            }
            if cfg.spec.kind == AlarmKind::Deviation && cfg.baseline.is_none() {
                self.problem(
                    a.name.span(),
                    p("baseline"),
                    "a deviation alarm needs the baseline it deviates from",
                );
            }
            for (v, key) in [
                (&a.deadband, "deadband"),
                (&a.on_delay_s, "on_delay_s"),
                (&a.off_delay_s, "off_delay_s"),
            ] {
                if let Some(v) = v {
                    let x = *v.get_ref();
                    if !(x.is_finite() && x >= 0.0) {
                        self.problem(
                            v.span(),
                            p(key),
                            format!("must be zero or positive, got {}", num(x)),
                        );
                        continue;
                    }
                    if key != "deadband" && x > MAX_DELAY_S {
                        self.problem(
                            v.span(),
                            p(key),
                            format!(
                                "must be at most {} s (one week), got {}",
                                num(MAX_DELAY_S),
                                num(x)
                            ),
                        );
                        continue;
                    }
                    match key {
                        "deadband" => cfg.spec.deadband = x,
                        "on_delay_s" => cfg.spec.on_delay_s = x,
                        _ => cfg.spec.off_delay_s = x,
                    }
                }
            }
            if let Some(pr) = priority {
                cfg.spec.priority = pr;
            }
            if let Some(l) = &a.latch {
                cfg.spec.latch = *l.get_ref();
            }
            for (v, slot) in [
                (&a.message, &mut cfg.message),
                (&a.consequence, &mut cfg.consequence),
                (&a.action, &mut cfg.action),
            ] {
                if let Some(t) = v {
                    *slot = t.get_ref().clone();
                }
            }
            if let Err(e) = cfg.spec.validate() {
                if !cfg.spec.setpoint.is_nan() {
                    self.problem(a.name.span(), format!("alarm[{i}]"), e.to_string());
                }
            }
            alarms.push(cfg);
        }
    }

    fn alarm_target(
        &mut self,
        i: usize,
        a: &RawAlarm,
        sources: &IdVec<SourceId, Source>,
        channels: &IdVec<ChannelId, Channel>,
        zones: &IdVec<ZoneId, Zone>,
    ) -> Option<AlarmTarget> {
        let p = |k: &str| format!("alarm[{i}].{k}");
        let given = [a.zone.is_some(), a.channel.is_some(), a.source.is_some()]
            .iter()
            .filter(|g| **g)
            .count();
        if given != 1 {
            self.problem(
                a.name.span(),
                p("zone"),
                "an alarm watches exactly one of zone, channel or source",
            );
            return None;
        }
        if let Some(z) = &a.zone {
            let Some(zone) = zones.position(|x| x.name.as_str() == z.get_ref()) else {
                self.problem(
                    z.span(),
                    p("zone"),
                    format!("no [[zone]] is named {:?}", z.get_ref()),
                );
                return None;
            };
            let Some(q) = &a.quantity else {
                self.problem(
                    a.name.span(),
                    p("quantity"),
                    "a zone alarm needs a quantity, e.g. \"shell_c\"",
                );
                return None;
            };
            if let Some(ZoneQuantity::InterfaceC(k)) = ZoneQuantity::from_name(q.get_ref()) {
                let z = &zones[zone];
                if z.model == Model::Quadratic || usize::from(k) + 1 >= z.layers.len() {
                    let n = if z.model == Model::Quadratic {
                        0
                    } else {
                        z.layers.len().saturating_sub(1)
                    };
                    self.problem(
                        q.span(),
                        p("quantity"),
                        format!("zone {:?} has {n} interface(s) (interface_c[0] is the first; the quadratic model has none)", z.name),
                    );
                    return None;
                }
            }
            let Some(quantity) = ZoneQuantity::from_name(q.get_ref()) else {
                let mut names: Vec<&str> = ZoneQuantity::ALL.iter().map(|(_, n, _)| *n).collect();
                names.push("interface_c[i]");
                self.problem(
                    q.span(),
                    p("quantity"),
                    format!(
                        "{:?} is not a zone quantity; use one of {}",
                        q.get_ref(),
                        names.join(", ")
                    ),
                );
                return None;
            };
            return Some(AlarmTarget::Zone { zone, quantity });
        }
        if let Some(c) = &a.channel {
            let Some(channel) = channels.position(|x| x.name.as_str() == c.get_ref()) else {
                self.problem(
                    c.span(),
                    p("channel"),
                    format!("no [[channel]] is named {:?}", c.get_ref()),
                );
                return None;
            };
            let health = match a.quantity.as_ref().map(|q| q.get_ref().as_str()) {
                None | Some("celsius") => false,
                Some("health") => true,
                Some(other) => {
                    let span = a.quantity.as_ref().map(|q| q.span()).unwrap_or_default();
                    self.problem(
                        span,
                        p("quantity"),
                        format!(
                            "{other:?} is not a channel quantity; use \"celsius\" or \"health\""
                        ),
                    );
                    return None;
                }
            };
            return Some(AlarmTarget::Channel { channel, health });
        }
        let s = a.source.as_ref()?;
        let Some(source) = sources.position(|x| x.name.as_str() == s.get_ref()) else {
            self.problem(
                s.span(),
                p("source"),
                format!("no [[source]] is named {:?}", s.get_ref()),
            );
            return None;
        };
        Some(AlarmTarget::Source { source })
    }

    fn mqtt(&mut self, m: &RawMqtt, site: &Site) -> MqttSettings {
        let host = m.host.get_ref().trim().to_string();
        if host.is_empty() {
            self.problem(m.host.span(), "mqtt.host", "must not be empty");
        }
        let tls = m.tls.as_ref().and_then(|t| self.tls(t, m, &host));
        // The IANA ports of MQTT and of MQTT over TLS.
        let default_port = if m.tls.is_some() { 8883 } else { 1883 };
        let port = match &m.port {
            Some(p) if (1..=65535).contains(p.get_ref()) => *p.get_ref() as u16,
            Some(p) => {
                self.problem(
                    p.span(),
                    "mqtt.port",
                    format!("must be 1 to 65535, got {}", p.get_ref()),
                );
                default_port
            }
            None => default_port,
        };
        let client_id = match &m.client_id {
            Some(c) => {
                let v = c.get_ref();
                if v.is_empty() || v.len() > 64 || !v.chars().all(|ch| ch.is_ascii_graphic()) {
                    self.problem(
                        c.span(),
                        "mqtt.client_id",
                        "must be 1 to 64 printable characters without spaces (a fixed id keeps the persistent session)",
                    );
                }
                v.clone()
            }
            None => format!("wallflux-{}-{}", site.plant, site.kiln),
        };
        let topic_root = match &m.topic_root {
            Some(t) => {
                let v = t.get_ref();
                if v.is_empty()
                    || v.starts_with('/')
                    || v.ends_with('/')
                    || v.contains(['+', '#', '\0'])
                    || v.contains("//")
                    || v.split('/').any(|seg| seg.starts_with('$'))
                {
                    self.problem(
                        t.span(),
                        "mqtt.topic_root",
                        format!("{v:?} is not a valid topic prefix (no wildcards, no leading, trailing or double '/', no level starting with '$', which brokers keep for themselves)"),
                    );
                }
                v.clone()
            }
            None => "wallflux".to_string(),
        };
        let keep_alive_s = match &m.keep_alive_s {
            Some(k) if (1.0..=65535.0).contains(k.get_ref()) => *k.get_ref() as u64,
            Some(k) => {
                self.problem(k.span(), "mqtt.keep_alive_s", "must be 1 to 65535 s");
                30
            }
            None => 30,
        };
        let queue_capacity = match &m.queue_capacity {
            Some(q) if (8..=100_000).contains(q.get_ref()) => *q.get_ref() as usize,
            Some(q) => {
                self.problem(
                    q.span(),
                    "mqtt.queue_capacity",
                    "must be 8 to 100000 messages",
                );
                256
            }
            None => 256,
        };
        let credentials = self.credentials(m);
        let protocol = match &m.protocol {
            Some(p) => self.word(p, "mqtt.protocol", "an MQTT version", MqttProtocol::V311),
            None => MqttProtocol::V311,
        };
        MqttSettings {
            host,
            port,
            client_id,
            topic_root,
            keep_alive_s,
            queue_capacity,
            credentials,
            tls,
            protocol,
        }
    }

    /// `[mqtt.tls]`: `ca_file` required (a plant broker has its own CA,
    /// and trusting every public root would let any certificate bought
    /// for the name pass); the client certificate and key together;
    /// `server_name` (default `mqtt.host`) a DNS name or an IP address.
    /// The files are only named here: the edge reads them at start.
    fn tls(&mut self, t: &Spanned<RawTls>, m: &RawMqtt, host: &str) -> Option<TlsSettings> {
        let mut file = |v: &Option<Spanned<String>>, key: &str| -> Option<PathBuf> {
            let f = v.as_ref()?;
            if f.get_ref().trim().is_empty() {
                self.problem(f.span(), format!("mqtt.tls.{key}"), "must not be empty");
                return None;
            }
            Some(PathBuf::from(f.get_ref()))
        };
        let ca_file = file(&t.get_ref().ca_file, "ca_file");
        let cert_file = file(&t.get_ref().client_cert_file, "client_cert_file");
        let key_file = file(&t.get_ref().client_key_file, "client_key_file");
        let r = t.get_ref();
        if r.ca_file.is_none() {
            self.problem(
                t.span(),
                "mqtt.tls.ca_file",
                "is required: the file (PEM) of the CA that signed the broker's certificate; a plant broker has its own CA, and the public web CAs are not trusted here",
            );
        }
        let client = match (&r.client_cert_file, &r.client_key_file) {
            (Some(_), None) => {
                self.problem(
                    t.span(),
                    "mqtt.tls.client_key_file",
                    "client_cert_file needs client_key_file (the private key of that certificate)",
                );
                None
            }
            (None, Some(_)) => {
                self.problem(
                    t.span(),
                    "mqtt.tls.client_cert_file",
                    "client_key_file needs client_cert_file (the certificate of that key)",
                );
                None
            }
            _ => cert_file
                .zip(key_file)
                .map(|(cert_file, key_file)| ClientIdentity {
                    cert_file,
                    key_file,
                }),
        };
        let server_name = match &r.server_name {
            Some(n) => {
                let v = n.get_ref().trim();
                if !is_server_name(v) {
                    self.problem(
                        n.span(),
                        "mqtt.tls.server_name",
                        format!("{v:?} is neither a DNS name nor an IP address (the name the broker's certificate is for)"),
                    );
                }
                v.to_string()
            }
            None => host.to_string(),
        };
        // The client connects to, and names, `host` as TLS wants it even
        // when the certificate is checked against `server_name`.
        if !host.is_empty() && !is_server_name(host) {
            self.problem(
                m.host.span(),
                "mqtt.host",
                format!("{host:?} is neither a DNS name nor an IP address, which TLS needs"),
            );
        }
        Some(TlsSettings {
            ca_file: ca_file?,
            client,
            server_name,
        })
    }

    /// `username` with exactly one of `password_file` and
    /// `password_credential`; over a link without TLS only with
    /// `allow_plaintext_credentials = true`.
    fn credentials(&mut self, m: &RawMqtt) -> Option<Credentials> {
        let password = match (&m.password_file, &m.password_credential) {
            (Some(f), None) if f.get_ref().is_empty() => {
                self.problem(f.span(), "mqtt.password_file", "must not be empty");
                None
            }
            (Some(f), None) => Some(PasswordSource::File(PathBuf::from(f.get_ref()))),
            (None, Some(c)) => {
                let v = c.get_ref();
                if v.is_empty() || v.contains('/') || v == "." || v == ".." {
                    self.problem(
                        c.span(),
                        "mqtt.password_credential",
                        "must be the name of a systemd credential (a file name, no '/')",
                    );
                }
                Some(PasswordSource::Credential(v.clone()))
            }
            (Some(_), Some(c)) => {
                self.problem(
                    c.span(),
                    "mqtt.password_credential",
                    "give password_file or password_credential, not both",
                );
                None
            }
            (None, None) => None,
        };
        let Some(user) = &m.username else {
            if let Some(f) = m.password_file.as_ref().or(m.password_credential.as_ref()) {
                self.problem(f.span(), "mqtt.username", "a password needs a username");
            }
            return None;
        };
        let username = user.get_ref();
        if username.is_empty()
            || username.chars().count() > 256
            || username.chars().any(char::is_control)
        {
            self.problem(
                user.span(),
                "mqtt.username",
                "must be 1 to 256 characters without control characters",
            );
        }
        let Some(password) = password else {
            self.problem(
                user.span(),
                "mqtt.username",
                "needs password_file (a file holding the password) or password_credential (a systemd credential)",
            );
            return None;
        };
        let allowed = m
            .allow_plaintext_credentials
            .as_ref()
            .filter(|a| *a.get_ref());
        match (&m.tls, allowed) {
            (None, None) => self.problem(
                user.span(),
                "mqtt.username",
                "the password would cross the network in clear text: set mqtt.tls (the broker's TLS listener), or allow_plaintext_credentials = true only where the link is trusted (loopback, an isolated segment)",
            ),
            (Some(_), Some(a)) => self.warning(
                a.span(),
                "mqtt.allow_plaintext_credentials",
                "has no effect: with mqtt.tls the password crosses the network encrypted",
            ),
            _ => {}
        }
        Some(Credentials {
            username: username.clone(),
            password,
        })
    }

    fn source(&mut self, i: usize, s: &RawSource) -> Source {
        let p = |k: &str| format!("source[{i}].{k}");
        let name = self.name(&s.name, &p("name"));
        let kind = self.word(&s.kind, &p("kind"), "a source kind", SourceKind::Line);
        if s.port.get_ref().is_empty() {
            self.problem(
                s.port.span(),
                p("port"),
                "must name a serial device, e.g. /dev/ttyUSB0",
            );
        }
        let baud = match &s.baud {
            Some(b) if (300..=4_000_000).contains(b.get_ref()) => *b.get_ref() as u32,
            Some(b) => {
                self.problem(
                    b.span(),
                    p("baud"),
                    format!("{} is not a usable baud rate (300 to 4000000)", b.get_ref()),
                );
                9600
            }
            None => 9600,
        };
        let cj_c = s.cj_c.as_ref().map(|c| {
            let v = self.finite(c, &p("cj_c"));
            if !(-50.0..=150.0).contains(&v) {
                self.problem(
                    c.span(),
                    p("cj_c"),
                    format!("{v} °C is not a plausible terminal temperature (-50 to 150 °C)"),
                );
            }
            v
        });
        let silence_s = s.silence_s.as_ref().map_or(10.0, |v| {
            self.within(v, &p("silence_s"), 0.1, MAX_DELAY_S, "seconds")
        });
        let bus = self.bus(i, s, kind, baud);
        Source {
            name,
            kind,
            port: s.port.get_ref().clone(),
            baud,
            cj_c,
            cj_channel: None,
            silence_s,
            bus,
        }
    }

    /// A Modbus source's bus keys (refused on a line source).
    fn bus(&mut self, i: usize, s: &RawSource, kind: SourceKind, baud: u32) -> Option<ModbusBus> {
        let p = |k: &str| format!("source[{i}].{k}");
        if kind != SourceKind::ModbusRtu {
            let given = [
                ("parity", s.parity.as_ref().map(|v| v.span())),
                ("stop_bits", s.stop_bits.as_ref().map(|v| v.span())),
                ("poll_ms", s.poll_ms.as_ref().map(|v| v.span())),
                ("timeout_ms", s.timeout_ms.as_ref().map(|v| v.span())),
                ("retries", s.retries.as_ref().map(|v| v.span())),
                (
                    "inter_frame_ms",
                    s.inter_frame_ms.as_ref().map(|v| v.span()),
                ),
            ];
            for (k, span) in given {
                if let Some(span) = span {
                    self.problem(span, p(k), "is a key of a kind = \"modbus-rtu\" source");
                }
            }
            return None;
        }
        let parity = self.word_or(s.parity.as_ref(), &p("parity"), "a parity", Parity::None);
        let stop_bits = match &s.stop_bits {
            Some(b) if matches!(b.get_ref(), 1 | 2) => *b.get_ref() as u8,
            Some(b) => {
                self.problem(b.span(), p("stop_bits"), "must be 1 or 2");
                1
            }
            None => 1,
        };
        let ms = |this: &mut Self, v: &Option<Spanned<f64>>, k: &str, lo: f64, hi: f64, d: f64| {
            v.as_ref()
                .map_or(d, |v| this.within(v, &p(k), lo, hi, "ms"))
        };
        let poll_ms = ms(self, &s.poll_ms, "poll_ms", 50.0, 3_600_000.0, 1000.0) as u64;
        let timeout_ms = ms(self, &s.timeout_ms, "timeout_ms", 10.0, 10_000.0, 300.0) as u64;
        let retries = match &s.retries {
            Some(r) if (0..=5).contains(r.get_ref()) => *r.get_ref() as u32,
            Some(r) => {
                self.problem(r.span(), p("retries"), "must be 0 to 5");
                1
            }
            None => 1,
        };
        let spec_us = crate::protocol::modbus::inter_frame_us(baud);
        let inter_frame_us = match &s.inter_frame_ms {
            Some(v) => {
                let us = (self.within(v, &p("inter_frame_ms"), 0.0, 1000.0, "ms") * 1000.0).ceil()
                    as u32;
                if us < spec_us {
                    self.problem(
                        v.span(),
                        p("inter_frame_ms"),
                        format!(
                            "must be at least the 3.5-character silence the Modbus serial line spec requires at {baud} baud, {:.2} ms",
                            spec_us as f64 / 1000.0
                        ),
                    );
                }
                us.max(spec_us)
            }
            None => spec_us,
        };
        Some(ModbusBus {
            parity,
            stop_bits,
            poll_ms,
            timeout_ms,
            retries,
            inter_frame_us,
        })
    }

    /// A channel's Modbus keys: read on a Modbus source, refused on a line
    /// source.
    fn point(
        &mut self,
        i: usize,
        c: &RawChannel,
        modbus: bool,
    ) -> Option<crate::protocol::modbus::Point> {
        use crate::protocol::modbus::{DataType, Function, Point, WordOrder};
        let p = |k: &str| format!("channel[{i}].{k}");
        if !modbus {
            let given = [
                ("unit_id", c.unit_id.as_ref().map(|v| v.span())),
                ("function", c.function.as_ref().map(|v| v.span())),
                ("address", c.address.as_ref().map(|v| v.span())),
                ("data_type", c.data_type.as_ref().map(|v| v.span())),
                ("word_order", c.word_order.as_ref().map(|v| v.span())),
                ("scale", c.scale.as_ref().map(|v| v.span())),
                ("offset", c.offset.as_ref().map(|v| v.span())),
                ("open_values", c.open_values.as_ref().map(|v| v.span())),
            ];
            for (k, span) in given {
                if let Some(span) = span {
                    self.problem(
                        span,
                        p(k),
                        format!("is a key of a channel on a kind = \"modbus-rtu\" source; source {:?} is a line source (its channels have input)", c.source.get_ref()),
                    );
                }
            }
            return None;
        }
        let unit = match &c.unit_id {
            Some(u) if (1..=247).contains(u.get_ref()) => *u.get_ref() as u8,
            Some(u) => {
                self.problem(
                    u.span(),
                    p("unit_id"),
                    format!("must be 1 to 247 (a slave address), got {}", u.get_ref()),
                );
                1
            }
            None => {
                self.problem(
                    c.name.span(),
                    p("unit_id"),
                    "is missing: the module's Modbus address, 1 to 247",
                );
                1
            }
        };
        let function = self.word_or(
            c.function.as_ref(),
            &p("function"),
            "a register kind",
            Function::Input,
        );
        let data_type = self.word_or(
            c.data_type.as_ref(),
            &p("data_type"),
            "a data type",
            DataType::I16,
        );
        let word_order = self.word_or(
            c.word_order.as_ref(),
            &p("word_order"),
            "a word order",
            WordOrder::HighFirst,
        );
        if let (Some(w), 1) = (&c.word_order, data_type.registers()) {
            self.problem(
                w.span(),
                p("word_order"),
                "applies to 32-bit data types (i32, u32, f32) only",
            );
        }
        let address = match &c.address {
            Some(a) if (0..=65535 - data_type.registers() as i64 + 1).contains(a.get_ref()) => {
                *a.get_ref() as u16
            }
            Some(a) => {
                self.problem(
                    a.span(),
                    p("address"),
                    format!("must be 0 to 65535, 0-based as on the wire (a manual's 30001 or 40001 is address 0), got {}", a.get_ref()),
                );
                0
            }
            None => {
                self.problem(
                    c.name.span(),
                    p("address"),
                    "is missing: the register's address, 0-based as on the wire",
                );
                0
            }
        };
        if let Some(a) = &c.address {
            let manual = match function {
                Function::Input => 30_001..=39_999,
                Function::Holding => 40_001..=49_999,
            };
            if manual.contains(a.get_ref()) {
                self.warning(
                    a.span(),
                    p("address"),
                    format!(
                        "{} looks like a manual's register number, not an address on the wire: register {} is address {}",
                        a.get_ref(),
                        a.get_ref(),
                        a.get_ref() - manual.start()
                    ),
                );
            }
        }
        let scale = match &c.scale {
            Some(v) => {
                let x = self.finite(v, &p("scale"));
                if x == 0.0 {
                    self.problem(v.span(), p("scale"), "must not be 0");
                }
                x
            }
            None => 1.0,
        };
        let offset = c
            .offset
            .as_ref()
            .map_or(0.0, |v| self.finite(v, &p("offset")));
        let mut open_values = heapless::Vec::new();
        if let Some(list) = &c.open_values {
            for v in list.get_ref() {
                let x = self.finite(v, &p("open_values"));
                if open_values.push(x).is_err() {
                    self.problem(v.span(), p("open_values"), "at most 4 values");
                    break;
                }
            }
        }
        Some(Point {
            unit,
            function,
            address,
            data_type,
            word_order,
            scale,
            offset,
            open_values,
        })
    }

    fn channel(&mut self, i: usize, c: &RawChannel, sources: &IdVec<SourceId, Source>) -> Channel {
        let p = |k: &str| format!("channel[{i}].{k}");
        let name = self.name(&c.name, &p("name"));
        let source = match sources.position(|s| s.name.as_str() == c.source.get_ref()) {
            Some(s) => s,
            None => {
                self.problem(
                    c.source.span(),
                    p("source"),
                    format!("no [[source]] is named {:?}", c.source.get_ref()),
                );
                unresolved()
            }
        };
        // Inputs are distinct per source (checked with the channels), so a
        // source has at most MAX_INPUT of them.
        let modbus = sources
            .get(source)
            .is_some_and(|s| s.kind == SourceKind::ModbusRtu);
        let input = match (&c.input, modbus) {
            (Some(n), false) => match u8::try_from(*n.get_ref()) {
                Ok(v) if (1..=MAX_INPUT).contains(&v) => v,
                _ => {
                    self.problem(
                        n.span(),
                        p("input"),
                        format!("must be 1 to {MAX_INPUT}, got {}", n.get_ref()),
                    );
                    0
                }
            },
            (Some(n), true) => {
                self.problem(
                    n.span(),
                    p("input"),
                    format!(
                        "source {:?} is a Modbus bus: a channel on it is read by unit_id, function and address, not input",
                        c.source.get_ref()
                    ),
                );
                0
            }
            (None, false) if sources.get(source).is_some() => {
                self.problem(
                    c.name.span(),
                    p("input"),
                    "is missing: the input number on the source, 1 to 64",
                );
                0
            }
            // Given below, by the channel's place on its bus.
            (None, _) => 0,
        };
        let point = self.point(i, c, modbus);
        let terminal = c.tc_type.get_ref() == "terminal";
        let tc_type = match TcType::from_letter(c.tc_type.get_ref()) {
            // A terminal sensor has no thermocouple type (K only fills the field).
            _ if terminal => TcType::K,
            Some(t) if c.tc_type.get_ref().len() == 1 => t,
            _ => {
                self.problem(
                    c.tc_type.span(),
                    p("type"),
                    format!(
                        "{:?} is not a thermocouple type; use one of B E J K N R S T, or \"terminal\" for a box's terminal (cold-junction) sensor",
                        c.tc_type.get_ref()
                    ),
                );
                TcType::K
            }
        };
        let signal = self.word_or(c.signal.as_ref(), &p("signal"), "a signal", Signal::Celsius);
        let tolerance = self.word_or(
            c.tolerance.as_ref(),
            &p("tolerance"),
            "a tolerance class",
            ToleranceClass::Iec2,
        );
        let uncertainty_c = c
            .uncertainty_c
            .as_ref()
            .map(|u| self.positive(u, &p("uncertainty_c"), "°C"));
        let mut calibration = Calibration::default();
        if let Some(o) = &c.calibration_offset_c {
            calibration.offset_c = self.finite(o, &p("calibration_offset_c"));
            if calibration.offset_c.abs() > 50.0 {
                self.problem(
                    o.span(),
                    p("calibration_offset_c"),
                    "more than ±50 °C is not a calibration correction: check the sensor",
                );
            }
        }
        if let Some(g) = &c.calibration_gain {
            calibration.gain = *g.get_ref();
            if !(0.9..=1.1).contains(&calibration.gain) {
                self.problem(
                    g.span(),
                    p("calibration_gain"),
                    "must be between 0.9 and 1.1 (a correction, not a scale)",
                );
            }
        }
        if let Some(d) = &c.calibration_date {
            match crate::time::Timestamp::parse(&format!("{}T00:00:00Z", d.get_ref())) {
                Ok(t) if d.get_ref().len() == 10 => calibration.date = Some(t),
                _ => self.problem(
                    d.span(),
                    p("calibration_date"),
                    format!("{:?} is not a date YYYY-MM-DD", d.get_ref()),
                ),
            }
        }
        if let Some(i) = &c.calibration_interval_days {
            calibration.interval_days =
                self.positive_up_to(i, &p("calibration_interval_days"), 36_500.0, "days");
        }
        let spike_c_per_min = c.spike_c_per_min.as_ref().map_or(
            if terminal {
                crate::monitor::channel::TERMINAL_SPIKE_C_PER_MIN
            } else {
                60.0
            },
            |v| self.positive(v, &p("spike_c_per_min"), "°C/min"),
        );
        if terminal && signal == Signal::Millivolts {
            let span = c.signal.as_ref().map(|s| s.span()).unwrap_or_default();
            self.problem(
                span,
                p("signal"),
                "a terminal sensor is read in °C: leave signal out or write \"celsius\"",
            );
        }
        Channel {
            name,
            source,
            input,
            point,
            tc_type,
            signal,
            tolerance,
            uncertainty_c,
            calibration,
            spike_c_per_min,
            kind: if terminal {
                ChannelKind::Terminal
            } else {
                ChannelKind::Thermocouple
            },
        }
    }

    fn property(&mut self, s: &Spanned<RawProperty>, path: &str, what: &'static str) -> Property {
        let result = match s.get_ref() {
            RawProperty::Constant(v) => Property::constant(what, *v),
            RawProperty::Table(points) => {
                let pts: Vec<(f64, f64)> = points.iter().map(|p| (p[0], p[1])).collect();
                Property::table(what, &pts)
            }
            RawProperty::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => {
                if coefficients.is_empty()
                    || coefficients.len() > MAX_POLYNOMIAL_TERMS
                    || from_c >= to_c
                    || !from_c.is_finite()
                    || !to_c.is_finite()
                {
                    self.problem(
                        s.span(),
                        path,
                        format!("a polynomial needs 1 to {MAX_POLYNOMIAL_TERMS} coefficients and from_c < to_c"),
                    );
                    return Property::Constant(1.0);
                }
                // Kept as a polynomial: every model evaluates and integrates
                // it exactly (clamped to its end values outside the range).
                Property::polynomial(what, coefficients, *from_c, *to_c)
            }
        };
        match result {
            Ok(p) => p,
            Err(e) => {
                self.problem(s.span(), path, e.to_string());
                Property::Constant(1.0)
            }
        }
    }

    fn material(&mut self, i: usize, m: &RawMaterial) -> NamedMaterial {
        let p = |k: &str| format!("material[{i}].{k}");
        let name = self.name(&m.name, &p("name"));
        let conductivity_w_mk = self.property(
            &m.conductivity_w_mk,
            &p("conductivity_w_mk"),
            "conductivity (W/m·K)",
        );
        let specific_heat_j_kgk = self.property(
            &m.specific_heat_j_kgk,
            &p("specific_heat_j_kgk"),
            "specific heat (J/kg·K)",
        );
        let (lo, hi) = CONDUCTIVITY_W_MK;
        let values: Vec<f64> = property_values(m.conductivity_w_mk.get_ref())
            .into_iter()
            .filter(|v| v.is_finite() && *v > 0.0)
            .collect();
        let (min, max) = values
            .iter()
            .fold((f64::INFINITY, 0.0_f64), |(a, b), v| (a.min(*v), b.max(*v)));
        // The value farthest out of the range, if any is.
        let outside = if max > hi {
            Some(max)
        } else if min < lo {
            Some(min)
        } else {
            None
        };
        if let Some(v) = outside {
            self.warning(
                m.conductivity_w_mk.span(),
                p("conductivity_w_mk"),
                format!(
                    "{} W/(m·K) is outside the {lo} to {hi} W/(m·K) of insulations, refractories and steel shells: check the value and its unit",
                    num(v)
                ),
            );
        }
        let density_kg_m3 = self.positive(&m.density_kg_m3, &p("density_kg_m3"), "kg/m³");
        let max_service_c = m
            .max_service_c
            .as_ref()
            .map(|v| self.celsius(v, &p("max_service_c")));
        let emissivity = m.emissivity.as_ref().map(|e| {
            let v = *e.get_ref();
            if !(0.0..=1.0).contains(&v) {
                self.problem(
                    e.span(),
                    p("emissivity"),
                    format!("must be between 0 and 1, got {v}"),
                );
            }
            v
        });
        let pct = |v: &mut Self, key: &str, default: f64, raw: &Option<Spanned<f64>>| match raw {
            None => default,
            Some(s) => {
                let x = *s.get_ref();
                if !(x.is_finite() && (0.0..=MAX_PROPERTY_UNCERTAINTY_PCT).contains(&x)) {
                    v.problem(
                        s.span(),
                        p(key),
                        format!(
                            "must be a standard uncertainty from 0 to {MAX_PROPERTY_UNCERTAINTY_PCT} %, got {x}"
                        ),
                    );
                }
                x
            }
        };
        let conductivity_uncertainty_pct = pct(
            self,
            "conductivity_uncertainty_pct",
            DEFAULT_CONDUCTIVITY_UNCERTAINTY_PCT,
            &m.conductivity_uncertainty_pct,
        );
        let heat_capacity_uncertainty_pct = pct(
            self,
            "heat_capacity_uncertainty_pct",
            DEFAULT_HEAT_CAPACITY_UNCERTAINTY_PCT,
            &m.heat_capacity_uncertainty_pct,
        );
        NamedMaterial {
            conductivity_uncertainty_pct,
            heat_capacity_uncertainty_pct,
            name,
            material: Material {
                conductivity_w_mk,
                density_kg_m3,
                specific_heat_j_kgk,
                max_service_c,
            },
            emissivity,
        }
    }

    fn zone(
        &mut self,
        i: usize,
        sz: &Spanned<RawZone>,
        channels: &IdVec<ChannelId, Channel>,
        materials: &[NamedMaterial],
    ) -> Zone {
        let z = sz.get_ref();
        let p = |k: &str| format!("zone[{i}].{k}");
        let name = self.name(&z.name, &p("name"));
        let area_m2 = self.positive_up_to(&z.area_m2, &p("area_m2"), 1e5, "m²");
        let interval_s = self.within(
            &z.interval_s,
            &p("interval_s"),
            INTERVAL_S.0,
            INTERVAL_S.1,
            "seconds",
        );
        // A misspelt model stands in as `layered`, the one with no
        // model-specific refusal (any number of layers, interfaces, a
        // fallback): one error for the name, not a cascade.
        let model = self.word(&z.model, &p("model"), "a model", Model::Layered);
        let orientation = self.word_or(
            z.orientation.as_ref(),
            &p("orientation"),
            "an orientation",
            Orientation::Vertical,
        );
        let height_m = z
            .height_m
            .as_ref()
            .map_or(2.0, |h| self.positive_up_to(h, &p("height_m"), 1000.0, "m"));
        let emissivity = match &z.emissivity {
            Some(e) => {
                let v = *e.get_ref();
                if !(0.0..=1.0).contains(&v) {
                    self.problem(
                        e.span(),
                        p("emissivity"),
                        format!("must be between 0 and 1, got {v}"),
                    );
                }
                v
            }
            // The shell material's emissivity, else 0.8 (oxidised steel is
            // 0.74 to 0.82 in handbook emissivity tables).
            None => z
                .layers
                .get_ref()
                .last()
                .and_then(|l| {
                    materials
                        .iter()
                        .find(|m| m.name.as_str() == l.get_ref().material.get_ref())
                })
                .and_then(|m| m.emissivity)
                .unwrap_or(0.8),
        };
        let ambient_c = z
            .ambient_c
            .as_ref()
            .map_or(25.0, |a| self.celsius(a, &p("ambient_c")));
        let surroundings_c = z
            .surroundings_c
            .as_ref()
            .map_or(ambient_c, |a| self.celsius(a, &p("surroundings_c")));
        let wind_m_s = z.wind_m_s.as_ref().map(|w| {
            let v = *w.get_ref();
            if !(v.is_finite() && (0.0..=60.0).contains(&v)) {
                self.problem(
                    w.span(),
                    p("wind_m_s"),
                    format!("must be 0 to 60 m/s, got {v}"),
                );
            }
            v
        });
        let surface_h_w_m2k = z
            .surface_h_w_m2k
            .as_ref()
            .map(|h| self.positive(h, &p("surface_h_w_m2k"), "W/(m²·K)"));
        let max_ramp_c_per_h = z
            .max_ramp_c_per_h
            .as_ref()
            .map(|h| self.positive(h, &p("max_ramp_c_per_h"), "°C/h"));
        let heat_loss_baseline_w = z
            .heat_loss_baseline_w
            .as_ref()
            .map(|h| self.positive(h, &p("heat_loss_baseline_w"), "W"));
        let forecast_h = match &z.forecast_h {
            Some(f) => {
                let v = f.get_ref().clone();
                if v.is_empty()
                    || v.len() > MAX_FORECASTS
                    || v.iter()
                        .any(|h| !(h.is_finite() && *h > 0.0 && *h <= 168.0))
                {
                    self.problem(
                        f.span(),
                        p("forecast_h"),
                        format!(
                            "1 to {MAX_FORECASTS} horizons, each more than 0 and at most 168 h"
                        ),
                    );
                }
                // Beyond MAX_FORECASTS refused above: the Settings are not built.
                v.iter().copied().take(MAX_FORECASTS).collect()
            }
            None => [1.0, 2.0, 4.0].into_iter().collect(),
        };
        let firing_setpoint_c = z
            .firing_setpoint_c
            .as_ref()
            .map(|f| self.celsius(f, &p("firing_setpoint_c")));
        let baseline_days = z.baseline_days.as_ref().map_or(7.0, |d| {
            self.positive_up_to(d, &p("baseline_days"), 3650.0, "days")
        });
        let hot_face_channel = z.hot_face_channel.as_ref().and_then(|c| {
            let i = channels.position(|x| x.name.as_str() == c.get_ref());
            if i.is_none() {
                self.problem(
                    c.span(),
                    p("hot_face_channel"),
                    format!("no [[channel]] is named {:?}", c.get_ref()),
                );
            }
            i
        });
        let baseline_start = self.word_or(
            z.baseline_start.as_ref(),
            &p("baseline_start"),
            "a baseline start",
            BaselineStart::FirstRun,
        );
        let lining_min_mm = z
            .lining_min_mm
            .as_ref()
            .map(|m| self.positive(m, &p("lining_min_mm"), "mm"));
        let cells_per_layer = match &z.cells_per_layer {
            Some(c) if (2..=32).contains(c.get_ref()) => *c.get_ref() as usize,
            Some(c) => {
                self.problem(c.span(), p("cells_per_layer"), "must be 2 to 32");
                16
            }
            None => 16,
        };
        if model == Model::Transient {
            self.transient_zone_keys(z, &p, cells_per_layer);
        }
        let rate_window_s = z
            .rate_window_s
            .as_ref()
            .map_or(600.0_f64.max(3.0 * interval_s), |w| {
                self.positive_up_to(w, &p("rate_window_s"), MAX_DELAY_S, "seconds")
            });

        let mut layers: HVec<ZoneLayer, MAX_LAYERS> = HVec::new();
        if z.layers.get_ref().is_empty() {
            self.problem(
                z.layers.span(),
                p("layers"),
                "a wall needs at least one layer",
            );
        }
        if z.layers.get_ref().len() > MAX_LAYERS {
            self.problem(
                z.layers.span(),
                p("layers"),
                format!("at most {MAX_LAYERS} layers"),
            );
        }
        for (j, l) in z.layers.get_ref().iter().enumerate() {
            let l = l.get_ref();
            let lp = format!("zone[{i}].layers[{j}]");
            let material = match materials
                .iter()
                .position(|m| m.name.as_str() == l.material.get_ref())
            {
                Some(m) => m,
                None => {
                    self.problem(
                        l.material.span(),
                        format!("{lp}.material"),
                        format!("no [[material]] is named {:?}", l.material.get_ref()),
                    );
                    usize::MAX
                }
            };
            let thickness_mm = self.positive_up_to(
                &l.thickness_mm,
                &format!("{lp}.thickness_mm"),
                MAX_LAYER_MM,
                "mm",
            );
            let last = j + 1 == z.layers.get_ref().len();
            let contact_m2k_w = match &l.contact_m2k_w {
                Some(c) if last => {
                    self.problem(c.span(), format!("{lp}.contact_m2k_w"), "the last layer's cold face is the shell surface: no contact resistance there");
                    0.0
                }
                Some(c) => {
                    let v = *c.get_ref();
                    if !(v.is_finite() && v >= 0.0) {
                        self.problem(
                            c.span(),
                            format!("{lp}.contact_m2k_w"),
                            format!("must be zero or positive, got {v}"),
                        );
                    }
                    v
                }
                None => 0.0,
            };
            let layer = ZoneLayer {
                material,
                thickness_m: thickness_mm / 1000.0,
                contact_m2k_w,
            };
            if layers.push_within(layer, "layers").is_err() {
                break; // refused above: the Settings are not built
            }
        }
        if model == Model::Quadratic && layers.len() > 1 {
            self.problem(
                z.model.span(),
                p("model"),
                format!(
                    "\"quadratic\" describes one homogeneous layer, but this wall has {} layers: a single polynomial across layers of different conductivity gives wrong fluxes",
                    layers.len()
                ),
            );
        }
        let thickness_m: f64 = layers.iter().map(|l| l.thickness_m).sum();
        let total_mm = thickness_m * 1000.0;
        if total_mm.is_finite() && total_mm > 0.0 && !(WALL_MM.0..=WALL_MM.1).contains(&total_mm) {
            self.warning(
                z.layers.span(),
                p("layers"),
                format!(
                    "the wall is {} mm thick in total, outside the {} to {} mm of kiln and furnace walls (common practice): thickness_mm and depth_mm are in millimetres",
                    num(total_mm),
                    WALL_MM.0,
                    WALL_MM.1
                ),
            );
        }

        let mut probes: HVec<Probe, MAX_PROBES> = HVec::new();
        if z.probes.get_ref().len() > MAX_PROBES {
            self.problem(
                z.probes.span(),
                p("probes"),
                format!("at most {MAX_PROBES} probes per zone"),
            );
        }
        if z.probes.get_ref().len() < 2 {
            self.problem(
                z.probes.span(),
                p("probes"),
                "a zone needs at least two probes at different depths to fit a profile",
            );
        }
        for (j, pr) in z.probes.get_ref().iter().enumerate() {
            let pr = pr.get_ref();
            let pp = format!("zone[{i}].probes[{j}]");
            let channel = match channels.position(|c| c.name.as_str() == pr.channel.get_ref()) {
                Some(c) => c,
                None => {
                    self.problem(
                        pr.channel.span(),
                        format!("{pp}.channel"),
                        format!("no [[channel]] is named {:?}", pr.channel.get_ref()),
                    );
                    unresolved()
                }
            };
            if let Some(first) = probes
                .iter()
                .position(|q: &Probe| q.channel == channel && channels.get(channel).is_some())
            {
                self.problem(
                    pr.channel.span(),
                    format!("{pp}.channel"),
                    format!(
                        "channel {:?} is already probes[{first}] of this zone",
                        pr.channel.get_ref()
                    ),
                );
            }
            let depth_mm = *pr.depth_mm.get_ref();
            if !depth_mm.is_finite()
                || depth_mm < 0.0
                || (thickness_m > 0.0 && depth_mm > thickness_m * 1000.0 + 1e-9)
            {
                self.problem(
                    pr.depth_mm.span(),
                    format!("{pp}.depth_mm"),
                    format!(
                        "{depth_mm} mm is outside the wall (0 mm at the hot face to {:.1} mm at the shell)",
                        thickness_m * 1000.0
                    ),
                );
            }
            let at_face = depth_mm.abs() < 1e-9 || (depth_mm - thickness_m * 1000.0).abs() < 1e-9;
            let depth_sigma_mm = match &pr.depth_sigma_mm {
                None if at_face => 0.0,
                None => DEFAULT_DEPTH_SIGMA_MM,
                Some(s) => {
                    let v = *s.get_ref();
                    if !(v.is_finite() && (0.0..=MAX_DEPTH_SIGMA_MM).contains(&v)) {
                        self.problem(
                            s.span(),
                            format!("{pp}.depth_sigma_mm"),
                            format!(
                                "must be a standard uncertainty from 0 to {MAX_DEPTH_SIGMA_MM} mm, got {v}"
                            ),
                        );
                    }
                    v
                }
            };
            let probe = Probe {
                channel,
                depth_m: depth_mm / 1000.0,
                depth_sigma_m: depth_sigma_mm / 1000.0,
            };
            if probes.push_within(probe, "probes").is_err() {
                break; // refused above: the Settings are not built
            }
        }
        if let [first, rest @ ..] = &probes[..] {
            if !rest.is_empty()
                && first.depth_m.is_finite()
                && rest
                    .iter()
                    .all(|q| (q.depth_m - first.depth_m).abs() < 1e-9)
            {
                self.problem(
                    z.probes.span(),
                    p("probes"),
                    format!(
                        "all {} probes are at {} mm: a temperature profile needs probes at two depths at least",
                        probes.len(),
                        num(first.depth_m * 1000.0)
                    ),
                );
            }
        }
        Zone {
            name,
            area_m2,
            model,
            interval_s,
            orientation,
            height_m,
            emissivity,
            ambient_c,
            surface: SurfaceParams {
                orientation,
                length_m: height_m,
                emissivity,
                ambient_c,
                surroundings_c,
                wind_m_s,
            },
            surface_h_w_m2k,
            max_ramp_c_per_h,
            heat_loss_baseline_w,
            forecast_h,
            firing_setpoint_c,
            cells_per_layer,
            baseline_days,
            hot_face_channel,
            lining_min_mm,
            rate_window_s,
            layers,
            probes,
            baseline_start,
            fallback: self.zone_fallback(z, model, &p("fallback")),
        }
    }
}

impl Validator<'_> {
    /// Settings of a `transient` zone its model cannot honour, refused
    /// rather than ignored: the lining baseline and sizing (layered only),
    /// and a `cells_per_layer` the grid cannot hold.
    fn transient_zone_keys(&mut self, z: &RawZone, p: &dyn Fn(&str) -> String, cells: usize) {
        let lining = "the transient model does not size the lining or learn its baseline (that needs model = \"layered\" and a hot_face_channel); remove it";
        let spans = [
            (
                "hot_face_channel",
                z.hot_face_channel.as_ref().map(|v| v.span()),
            ),
            ("lining_min_mm", z.lining_min_mm.as_ref().map(|v| v.span())),
            ("baseline_days", z.baseline_days.as_ref().map(|v| v.span())),
            (
                "baseline_start",
                z.baseline_start.as_ref().map(|v| v.span()),
            ),
        ];
        for (key, span) in spans {
            if let Some(span) = span {
                self.problem(span, p(key), lining);
            }
        }
        if let Some(c) = &z.cells_per_layer {
            let layers = z.layers.get_ref();
            let contacts = layers
                .iter()
                .filter(|l| {
                    l.get_ref()
                        .contact_m2k_w
                        .as_ref()
                        .is_some_and(|c| *c.get_ref() > 0.0)
                })
                .count();
            let nodes = layers.len() * cells + 1 + contacts;
            let most = crate::physics::transient::MAX_NODES;
            if !layers.is_empty() && nodes > most {
                let fit = (most - 1 - contacts.min(most - 1)) / layers.len();
                self.problem(
                    c.span(),
                    p("cells_per_layer"),
                    format!("{} layers × {cells} cells (and a node pair at each contact) need {nodes} nodes, at most {most}: use at most {fit}, or leave cells_per_layer out", layers.len()),
                );
            }
        }
    }

    /// `fallback`: only `"transient"`, for a quadratic or layered zone.
    fn zone_fallback(&mut self, z: &RawZone, model: Model, key: &str) -> Option<Model> {
        let f = z.fallback.as_ref()?;
        match (f.get_ref().as_str(), model) {
            ("transient", Model::Quadratic | Model::Layered) => Some(Model::Transient),
            ("transient", Model::Transient) => {
                self.problem(
                    f.span(),
                    key.to_string(),
                    "a transient zone has no steady model to fall back from; remove fallback"
                        .to_string(),
                );
                None
            }
            (other, _) => {
                self.problem(
                    f.span(),
                    key.to_string(),
                    format!("{other:?} is not a fallback model; use \"transient\" (for a quadratic or layered zone)"),
                );
                None
            }
        }
    }
}
