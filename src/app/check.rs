//! `wallflux check`: validate a configuration and print what it describes.
//! Warnings (implausible but usable settings) go to stderr, each with its
//! line and key; `--strict` refuses them like errors.

use std::fmt::Write as _;
use std::path::Path;

use super::Failure;
use crate::config::format_problem;

pub fn check(path: &Path, strict: bool) -> Result<(), Failure> {
    let s = super::load(path)?;
    let file = path.display().to_string();
    // The configuration's own warnings, then its secret files that others
    // can read (named, never read out).
    let mut lines: Vec<String> = s
        .warnings
        .iter()
        .map(|w| format_problem(&file, w))
        .collect();
    lines.extend(crate::publish::tls::secret_file_warnings(&s.mqtt));
    let n = lines.len();
    let plural = if n == 1 { "" } else { "s" };
    if strict && n > 0 {
        let mut msg =
            format!("{file}: {n} warning{plural} in the configuration, refused with --strict");
        for w in &lines {
            let _ = write!(msg, "\n  {w}");
        }
        return Err(Failure::usage(anyhow::anyhow!(msg)));
    }
    for w in &lines {
        super::say(&format!("wallflux: warning: {w}"));
    }
    super::write_stdout(&summary(&s, &file, n))?;
    Ok(())
}

/// What the configuration describes, in its own words.
fn summary(s: &crate::config::Settings, file: &str, warnings: usize) -> String {
    let mut o = String::new();
    if warnings == 0 {
        let _ = writeln!(o, "{file}: configuration ok");
    } else {
        let _ = writeln!(
            o,
            "{file}: configuration ok, with {warnings} warning{} (on stderr)",
            if warnings == 1 { "" } else { "s" }
        );
    }
    let _ = writeln!(o, "  site      {} / {}", s.site.plant, s.site.kiln);
    let _ = writeln!(
        o,
        "  mqtt      {}:{}  topics under {}/",
        s.mqtt.host,
        s.mqtt.port,
        s.topic_root()
    );
    let _ = writeln!(o, "  state dir {}", s.state_dir.display());
    for (si, src) in s.sources.iter_ids() {
        let n = s.channels.iter().filter(|c| c.source == si).count();
        let what = match &src.bus {
            Some(b) => format!(
                "Modbus RTU on {} at {} baud, parity {}, {} stop bit(s), a poll every {} ms (timeout {} ms, {} retries)",
                src.port,
                src.baud,
                b.parity.name(),
                b.stop_bits,
                b.poll_ms,
                b.timeout_ms,
                b.retries
            ),
            None => format!("line protocol on {} at {} baud", src.port, src.baud),
        };
        let _ = writeln!(o, "  source    {:<16} {what}, {n} channels", src.name);
    }
    for z in &s.zones {
        let layers: Vec<String> = z
            .layers
            .iter()
            .map(|l| {
                format!(
                    "{} {:.0} mm",
                    s.materials[l.material].name,
                    l.thickness_m * 1000.0
                )
            })
            .collect();
        let _ = writeln!(
            o,
            "  zone      {:<16} {} model, {:.2} m², every {} s, wall {:.0} mm ({})",
            z.name,
            z.model.name(),
            z.area_m2,
            z.interval_s,
            z.thickness_m() * 1000.0,
            layers.join(" + ")
        );
        for p in &z.probes {
            let c = &s.channels[p.channel];
            let at = match &c.point {
                Some(pt) => format!(
                    "unit {} {} register {} ({})",
                    pt.unit,
                    pt.function.name(),
                    pt.address,
                    pt.data_type.name()
                ),
                None => format!("input {}", c.input),
            };
            let _ = writeln!(
                o,
                "    probe   {:<16} {:>6.1} mm  type {} {} on {} {at}",
                c.name,
                p.depth_m * 1000.0,
                c.tc_type.letter(),
                c.signal.name(),
                s.sources[c.source].name,
            );
        }
    }
    let builtin = s.alarms.iter().filter(|a| a.builtin).count();
    let _ = writeln!(
        o,
        "  alarms    {} ({} built-in, {} configured)",
        s.alarms.len(),
        builtin,
        s.alarms.len() - builtin
    );
    for a in &s.alarms {
        let (zone, channel, source, quantity) =
            crate::monitor::alarm_engine::target_names(s, a.target);
        let setpoint = match a.spec.kind {
            crate::monitor::alarm::AlarmKind::Diagnostic => String::new(),
            _ => format!(" {} {}", a.spec.setpoint, a.unit()),
        };
        let _ = writeln!(
            o,
            "    alarm   {:<32} {} {}.{}{} ({})",
            a.name,
            a.spec.kind.name(),
            zone.or(channel).or(source).unwrap_or(""),
            quantity,
            setpoint,
            a.spec.priority.name()
        );
    }
    o
}
