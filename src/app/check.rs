//! `wallflux check`: validate a configuration and print what it describes.

use std::path::Path;

use super::Failure;

pub fn check(path: &Path) -> Result<(), Failure> {
    let s = super::load(path)?;
    println!("{}: configuration ok", path.display());
    println!("  site      {} / {}", s.site.plant, s.site.kiln);
    println!(
        "  mqtt      {}:{}  topics under {}/",
        s.mqtt.host,
        s.mqtt.port,
        s.topic_root()
    );
    println!("  state dir {}", s.state_dir.display());
    for src in &s.sources {
        let n = s
            .channels
            .iter()
            .filter(|c| std::ptr::eq(&s.sources[c.source], src))
            .count();
        println!(
            "  source    {:<16} line protocol on {} at {} baud, {} channels",
            src.name, src.port, src.baud, n
        );
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
        println!(
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
            println!(
                "    probe   {:<16} {:>6.1} mm  type {} {:?} on {} input {}",
                c.name,
                p.depth_m * 1000.0,
                c.tc_type.letter(),
                c.signal,
                s.sources[c.source].name,
                c.input
            );
        }
    }
    let builtin = s.alarms.iter().filter(|a| a.builtin).count();
    println!(
        "  alarms    {} ({} built-in, {} configured)",
        s.alarms.len(),
        builtin,
        s.alarms.len() - builtin
    );
    for a in &s.alarms {
        let (zone, channel, source, quantity) =
            crate::monitor::alarm_engine::target_names(&s, a.target);
        let setpoint = match a.spec.kind {
            crate::monitor::alarm::AlarmKind::Diagnostic => String::new(),
            _ => format!(" {} {}", a.spec.setpoint, a.unit()),
        };
        println!(
            "    alarm   {:<32} {:?} {}.{}{} ({:?})",
            a.name,
            a.spec.kind,
            zone.or(channel).or(source).unwrap_or(""),
            quantity,
            setpoint,
            a.spec.priority
        );
    }
    Ok(())
}
