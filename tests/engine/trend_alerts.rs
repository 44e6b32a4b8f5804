//! Trend alerts keep their promise over a whole firing: the demo's firing
//! (wallflux_sim::firing, a 28 h shuttle-kiln schedule of our own, scaled to
//! each zone's set-point as in wallflux_sim::scenario) on the demo kiln's
//! three walls, each a finite-difference model (wallflux_sim::wall), through
//! the pure engine in simulated time.
//!
//! The promise (docs/alarms.md): at most one line per trend per
//! `trend_repeat_min`, unless the estimated time to the limit halves; no
//! hot-face trend toward a limit above the zone's `firing_setpoint_c` (the
//! kiln's control stops the ramp there).

use std::collections::BTreeMap;
use std::sync::Arc;

use wallflux::acquire::line::{Unit, Value};
use wallflux::app::demo::DEMO_CONFIG;
use wallflux::config::{self, AlarmTarget, Settings, ZoneQuantity};
use wallflux::ids::AlarmId;
use wallflux::monitor::output::{Output, TrendEvent};
use wallflux::monitor::zone::ZoneStatus;
use wallflux::monitor::Monitor;
use wallflux::sim::firing::FiringSchedule;
use wallflux::sim::scenario::zone_setpoint_c;
use wallflux::sim::wall::{Layer, WallSim};
use wallflux::time::Timestamp;

const T0: f64 = 1_800_000_000.0;
const SCAN_S: f64 = 30.0;

struct Firing {
    settings: Arc<Settings>,
    trends: Vec<TrendEvent>,
    statuses: BTreeMap<(String, &'static str), usize>,
}

/// The whole demo firing plus an hour, one scan per `SCAN_S`, readings in
/// °C (the demo's millivolt channels as °C: the conversion is tested
/// elsewhere and does not matter here).
fn fire(config_text: &str) -> Firing {
    let text = config_text.replace("signal = \"millivolts\"\n", "");
    let settings = Arc::new(config::parse(&text, "demo.toml", None).expect("demo config"));
    // Each zone's own firing, as in the demo (sim::scenario).
    let firings: Vec<FiringSchedule> = settings
        .zones
        .iter()
        .map(|z| FiringSchedule::demo_to(zone_setpoint_c(z)))
        .collect();
    let mut walls: Vec<WallSim> = settings
        .zones
        .iter()
        .zip(&firings)
        .map(|(z, firing)| {
            let layers = z
                .layers
                .iter()
                .map(|l| Layer {
                    material: settings.materials[l.material].material.clone(),
                    thickness_m: l.thickness_m,
                })
                .collect();
            let mut w = WallSim::new(layers, 24, firing.setpoint_c(0.0), z.surface).unwrap();
            w.settle(firing.setpoint_c(0.0));
            w
        })
        .collect();
    let mut m = Monitor::new(settings.clone(), Timestamp::from_epoch_s(T0));
    let mut trends = Vec::new();
    let mut statuses = BTreeMap::new();
    let mut t = 0.0;
    // Small deterministic noise (a linear congruential sequence), ±0.15 °C.
    let mut seed: u64 = 0x9E37_79B9_7F4A_7C15;
    let mut noise = move || {
        seed = seed
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        ((seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 0.3
    };
    let duration_s = firings.iter().map(|f| f.duration_s()).fold(0.0, f64::max);
    while t < duration_s + 3600.0 {
        t += SCAN_S;
        let now = Timestamp::from_epoch_s(T0 + t);
        for (w, firing) in walls.iter_mut().zip(&firings) {
            w.step(SCAN_S, firing.setpoint_c(t));
        }
        for (z, wall) in settings.zones.iter().zip(&walls) {
            for p in &z.probes {
                let v = wall.temperature_at(p.depth_m) + noise();
                m.handle_value(
                    p.channel,
                    Value::Reading {
                        value: (v * 10.0).round() / 10.0,
                        unit: Unit::Celsius,
                    },
                    None,
                    now,
                );
            }
        }
        m.handle_timeout(now);
        while let Some(o) = m.poll_output() {
            match o {
                Output::ZoneState(z) => {
                    *statuses
                        .entry((z.report.zone.to_string(), z.report.status.name()))
                        .or_insert(0) += 1;
                }
                Output::TrendAlert(tr) => trends.push(tr),
                _ => {}
            }
        }
    }
    Firing {
        settings,
        trends,
        statuses,
    }
}

#[test]
fn a_whole_firing_gives_the_trend_lines_the_docs_promise_and_no_more() {
    // Every demo zone as a user would set it up: with its firing set-point
    // (the roof's fibre's service limit, 1425 °C, lies above its 1250 °C).
    let f = fire(DEMO_CONFIG);
    assert!(f
        .settings
        .zones
        .iter()
        .all(|z| z.firing_setpoint_c.is_some()));
    let repeat_s = f.settings.trend.repeat_min * 60.0;
    let mut per_alarm: BTreeMap<AlarmId, Vec<&TrendEvent>> = BTreeMap::new();
    for t in &f.trends {
        let i = f.settings.alarm_named(&t.alarm);
        per_alarm
            .entry(i.expect("a configured alarm"))
            .or_default()
            .push(t);
    }
    let mut summary = String::new();
    for (&i, lines) in &per_alarm {
        summary += &format!("{}: {}; ", f.settings.alarms[i].name, lines.len());
    }
    eprintln!("trend lines per alarm: {summary}");
    eprintln!("zone statuses: {:?}", f.statuses);
    assert!(!f.trends.is_empty(), "a firing gives some trend lines");
    for (&i, lines) in &per_alarm {
        let a = &f.settings.alarms[i];
        for w in lines.windows(2) {
            let gap_s = w[1].time.since(w[0].time);
            let on_course_h = w[0].eta_h - gap_s / 3600.0;
            assert!(
                gap_s >= repeat_s - 1e-6 || w[1].eta_h < 0.5 * on_course_h,
                "{}: a line {gap_s} s after the last (repeat {repeat_s} s), estimate {:.2} h after {:.2} h ({summary})",
                a.name,
                w[1].eta_h,
                w[0].eta_h
            );
        }
        // No hot-face trend toward a limit the kiln's set-point stays below.
        if let AlarmTarget::Zone {
            zone,
            quantity: ZoneQuantity::HotFaceC,
        } = a.target
        {
            if let Some(sp) = f.settings.zones[zone].firing_setpoint_c {
                assert!(
                    a.spec.setpoint <= sp,
                    "{}: {} hot-face trend lines toward {} °C above the set-point {sp} °C",
                    a.name,
                    lines.len(),
                    a.spec.setpoint
                );
            }
        }
    }
    // The demo's door (a steady fit) spends its heat-up `not_steady`.
    assert!(
        f.statuses
            .get(&("door".to_string(), ZoneStatus::NotSteady.name()))
            .is_some_and(|&n| n > 100),
        "{:?}",
        f.statuses
    );
}

/// A steady wall with a uniform heat sink (Incropera §3.5, as in
/// tests/cli.rs: q(x) = q0 + q‴x, T(x) = T0 − (q0/k)x − (q‴/2k)x²; q0 =
/// 1500 W/m², q‴ = −1000 W/m³, k = 1.2 W/mK, L = 0.3 m, T0 = 1100 °C), three
/// probes, 10 m²: a flat heat loss of 12 000 W. The middle probe spikes
/// +300 °C for two readings (held back by the spike filter); meanwhile the
/// zone stands on two probes and a straight line, whose shell flux is the
/// mean of q over 30–300 mm, 1335 W/m² (13 350 W). That step is not the
/// wall's: the loss is flat, so no trend line toward a 12 600 W limit.
#[test]
fn a_spike_does_not_make_a_flat_heat_loss_rise() {
    let (k, l, q0, qs, t0) = (1.2, 0.3, 1500.0, -1000.0, 1100.0);
    let temp = |x: f64| t0 - q0 / k * x - qs / (2.0 * k) * x * x;
    let depths = [30.0, 150.0, 300.0];
    // The shell balance met: h = q(L) / (T(L) − 25).
    let h = (q0 + qs * l) / (temp(l) - 25.0);
    let mut text = format!(
        "[site]\nplant = \"p\"\nkiln = \"k\"\n[mqtt]\nhost = \"127.0.0.1\"\n\
         [[source]]\nname = \"box\"\nkind = \"line\"\nport = \"/dev/null\"\nsilence_s = 300\n\
         [[material]]\nname = \"m\"\nconductivity_w_mk = {k}\ndensity_kg_m3 = 2000.0\nspecific_heat_j_kgk = 1000.0\n"
    );
    for i in 0..3 {
        text += &format!(
            "[[channel]]\nname = \"p{i}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\nuncertainty_c = 0.5\n",
            i + 1
        );
    }
    text += &format!(
        "[[zone]]\nname = \"wall\"\narea_m2 = 10.0\nmodel = \"quadratic\"\ninterval_s = 10\nrate_window_s = 600\n\
         surface_h_w_m2k = {h}\nambient_c = 25.0\nlayers = [{{ material = \"m\", thickness_mm = 300 }}]\nprobes = ["
    );
    for (i, d) in depths.iter().enumerate() {
        text += &format!("{{ channel = \"p{i}\", depth_mm = {d} }},");
    }
    text += "]\n[[alarm]]\nname = \"wall-loss-high\"\nzone = \"wall\"\nquantity = \"heat_loss_w\"\nkind = \"high\"\nsetpoint = 12600.0\n";
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let probes = crate::common::probe_channels(&settings, "wall");
    let mut m = Monitor::new(settings.clone(), Timestamp::from_epoch_s(T0));
    let mut trends = Vec::new();
    let mut losses = Vec::new();
    for scan in 1..=180 {
        let now = Timestamp::from_epoch_s(T0 + 10.0 * f64::from(scan));
        for (i, (&ch, d)) in probes.iter().zip(&depths).enumerate() {
            let spike = if i == 1 && (90..92).contains(&scan) {
                300.0
            } else {
                0.0
            };
            m.handle_value(
                ch,
                Value::Reading {
                    value: temp(d / 1000.0) + spike,
                    unit: Unit::Celsius,
                },
                None,
                now,
            );
        }
        m.handle_timeout(now);
        while let Some(o) = m.poll_output() {
            match o {
                Output::ZoneState(z) => losses.push(z.report.heat_loss_w),
                Output::TrendAlert(t) => trends.push(t),
                _ => {}
            }
        }
    }
    // The spike was seen (the zone's loss stepped), and the closed form
    // holds outside it.
    assert!(
        losses
            .iter()
            .flatten()
            .any(|&w| (w - 13_350.0).abs() < 20.0),
        "{losses:?}"
    );
    assert!((losses[60].unwrap() - 12_000.0).abs() < 1.0);
    assert!(
        trends.is_empty(),
        "trend lines on a flat heat loss: {:?}",
        trends
            .iter()
            .map(|t| format!("{:.0} W rising {:.0} W/h", t.value, t.rate_per_h))
            .collect::<Vec<_>>()
    );
}
