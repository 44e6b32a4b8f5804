//! Channel diagnostics through the engine (`Monitor`, the same code the
//! daemon and `analyze` drive): each fault injected into a live zone is
//! flagged, left out of the fit, the zone's numbers stay within their
//! uncertainty, and the flag clears when the fault goes.
//!
//! The wall: a steady slab without source, constant k (Fourier's law,
//! Incropera ch. 3): T(x) = T0 − (q/k)·x, q = 2000 W/m², k = 1.25 W/mK,
//! T0 = 1000 °C, L = 0.25 m; optionally the whole profile rising at a
//! uniform rate (a uniform rise leaves the gradient, hence q, unchanged).

use std::sync::Arc;

use wallflux::acquire::line::{Unit, Value};
use wallflux::config;
use wallflux::monitor::channel::Health;
use wallflux::monitor::output::{Output, ZoneState};
use wallflux::monitor::zone::{ZoneReport, ZoneStatus};
use wallflux::monitor::Monitor;
use wallflux::time::Timestamp;

const Q: f64 = 2000.0;
const K: f64 = 1.25;
const T0: f64 = 1000.0;
const DEPTHS_MM: [f64; 5] = [20.0, 70.0, 130.0, 190.0, 250.0];

fn temp(depth_mm: f64) -> f64 {
    T0 - Q / K * depth_mm / 1000.0
}

fn monitor() -> Monitor {
    let text = crate::common::one_zone_config("/dev/null", 1883, K, 250.0, &DEPTHS_MM, 10.0);
    let s = config::parse(&text, "t.toml", None).unwrap();
    Monitor::new(Arc::new(s), Timestamp::from_epoch_s(0.0))
}

/// Feeds one scan per second for `secs` seconds from `from_s`, with `f`
/// giving each probe's value; returns the zone states that came due.
fn run(
    m: &mut Monitor,
    from_s: u32,
    secs: u32,
    f: impl Fn(usize, f64) -> Option<f64>,
) -> Vec<ZoneReport> {
    let mut out = Vec::new();
    for s in from_s..from_s + secs {
        let now = Timestamp::from_epoch_s(f64::from(s));
        m.handle_timeout(now);
        while let Some(o) = m.poll_output() {
            let Output::ZoneState(ZoneState { report: r, .. }) = o else {
                continue;
            };
            out.push(r);
        }
        let probes = crate::common::probe_channels(m.settings(), "wall");
        for (i, ch) in probes.into_iter().enumerate() {
            let v = match f(i, f64::from(s)) {
                Some(c) => Value::Reading {
                    value: c,
                    unit: Unit::Celsius,
                },
                None => Value::Open,
            };
            m.handle_value(ch, v, None, now);
        }
    }
    out
}

/// A little reading noise (±0.05 °C, deterministic): live thermocouples
/// never repeat a value exactly for long, frozen inputs do.
fn noise(i: usize, t: f64) -> f64 {
    0.05 * ((t * 1.7 + i as f64 * 2.3).sin())
}

fn steady(i: usize, t: f64) -> Option<f64> {
    Some(temp(DEPTHS_MM[i]) + noise(i, t))
}

/// The zone's shell flux agrees with the closed form within 3 σ of its
/// own reported uncertainty.
fn assert_within_uncertainty(r: &ZoneReport) {
    let q = r.flux_shell_w_m2.unwrap();
    let sigma = r.uncertainty.as_ref().unwrap().flux_shell_w_m2;
    assert!(
        (q - Q).abs() <= 3.0 * sigma + 1e-6,
        "q_shell {q} vs {Q} ± 3×{sigma}"
    );
}

fn channel_health(m: &mut Monitor, at_s: f64, channel: &str) -> Health {
    let ch = crate::common::channel(m.settings(), channel);
    m.channel_state(ch, Timestamp::from_epoch_s(at_s))
        .expect("a channel state")
        .status
}

#[test]
fn spike_is_held_back_and_clears() {
    let mut m = monitor();
    let r = run(&mut m, 0, 60, steady);
    assert_eq!(r.last().unwrap().status, ZoneStatus::Ok);
    // One reading 300 °C high at t = 65 s (a wire touching, EMI): far
    // faster than the 60 °C/min default.
    let r = run(&mut m, 60, 11, |i, t| {
        steady(i, t).map(|c| if i == 2 && t == 65.0 { c + 300.0 } else { c })
    });
    let during = r.iter().find(|r| r.time.epoch_s() == 70.0).unwrap();
    assert_eq!(
        during.status,
        ZoneStatus::Ok,
        "the spike is not in the state at 70 s"
    );
    assert!((during.probes[2].measured_c.unwrap() - temp(130.0)).abs() < 0.1);
    assert_within_uncertainty(during);
    // Held back while it is the latest value.
    let mut m2 = monitor();
    run(&mut m2, 0, 60, steady);
    let r = run(&mut m2, 60, 11, |i, t| {
        steady(i, t).map(|c| if i == 2 && t == 70.0 { c + 300.0 } else { c })
    });
    assert!(r
        .iter()
        .all(|r| r.probes[2].measured_c.unwrap() < temp(130.0) + 1.0));
    assert_eq!(channel_health(&mut m2, 70.0, "p2"), Health::Spike);
    run(&mut m2, 71, 2, steady);
    assert_eq!(
        channel_health(&mut m2, 72.0, "p2"),
        Health::Ok,
        "a normal reading clears it"
    );
}

#[test]
fn a_probe_that_reads_off_is_an_outlier_and_excluded() {
    let mut m = monitor();
    run(&mut m, 0, 30, steady);
    // Probe 3 drifts 40 °C high (a degraded junction, a wrong type). It is
    // judged once the jump has left its 100 s rate window.
    let r = run(&mut m, 30, 60, |i, t| {
        steady(i, t).map(|c| if i == 3 { c + 40.0 } else { c })
    });
    assert!(
        r.iter().all(|r| r.probes[3].status != Health::Outlier),
        "judged during the jump"
    );
    let r = run(&mut m, 90, 90, |i, t| {
        steady(i, t).map(|c| if i == 3 { c + 40.0 } else { c })
    });
    let last = r.last().unwrap();
    assert_eq!(last.status, ZoneStatus::Degraded);
    assert_eq!(last.probes[3].status, Health::Outlier);
    assert_eq!(last.probes_used, 4);
    assert_within_uncertainty(last);
    assert_eq!(channel_health(&mut m, 180.0, "p3"), Health::Outlier);
    // Back in line: the flag clears.
    let r = run(&mut m, 180, 30, steady);
    let last = r.last().unwrap();
    assert_eq!(last.status, ZoneStatus::Ok);
    assert_eq!(last.probes[3].status, Health::Ok);
    assert_eq!(channel_health(&mut m, 210.0, "p3"), Health::Ok);
}

#[test]
fn a_probe_frozen_while_the_wall_heats_is_stuck() {
    // The whole wall rising at 360 °C/h (0.1 °C/s): every probe moves 10 °C
    // over the 100 s rate window, except probe 1, frozen at its value at
    // 100 s (a failed input module holding its last value).
    let rising = |i: usize, t: f64| Some(temp(DEPTHS_MM[i]) - 300.0 + 0.1 * t + noise(i, t));
    let mut m = monitor();
    let r = run(&mut m, 0, 100, rising);
    // Heat stored at a uniform rise: ρ c_p (dT/dt) L = 2000 × 1000 × 0.1 ×
    // 0.25 = 50 000 W/m² (the trapezoid is exact for a uniform rate).
    let stored = r.last().unwrap().stored_w_m2.unwrap();
    assert!((stored - 50_000.0).abs() < 50.0, "stored {stored} W/m²");
    let frozen = rising(1, 100.0).unwrap();
    let r = run(&mut m, 100, 200, |i, t| {
        if i == 1 {
            Some(frozen)
        } else {
            rising(i, t)
        }
    });
    let last = r.last().unwrap();
    assert_eq!(last.probes[1].status, Health::Stuck);
    // A steady model cannot vouch for a wall storing 25 times its through
    // flux (the hot face then takes in 50 000 W/m² more than the shell
    // gives off): `not_steady`, the model's numbers withheld, the
    // measured values kept; the stuck probe is flagged all the same.
    assert_eq!(last.status, ZoneStatus::NotSteady);
    assert_eq!(last.flux_shell_w_m2, None);
    assert!(last.probes.iter().all(|p| p.measured_c.is_some()));
    let rate = last.probes[0].rate_measured_c_per_h.unwrap();
    // ±0.05 °C of noise over the 100 s window moves the slope by a few °C/h.
    assert!(
        (rate - 360.0).abs() < 5.0,
        "measured rate {rate} °C/h (exact 360)"
    );
    assert_eq!(channel_health(&mut m, 300.0, "p1"), Health::Stuck);
    // Moving again: clears.
    let r = run(&mut m, 300, 100, rising);
    assert_eq!(r.last().unwrap().probes[1].status, Health::Ok);
}

#[test]
fn open_and_stale_probes_degrade_then_insufficient() {
    let mut m = monitor();
    run(&mut m, 0, 30, steady);
    let r = run(
        &mut m,
        30,
        30,
        |i, t| if i == 0 { None } else { steady(i, t) },
    );
    let last = r.last().unwrap();
    assert_eq!(last.probes[0].status, Health::Open);
    assert_eq!(last.status, ZoneStatus::Degraded);
    assert_within_uncertainty(last);
    // Only one probe left reporting: no numbers at all.
    let r = run(
        &mut m,
        60,
        60,
        |i, t| if i == 4 { steady(i, t) } else { None },
    );
    let last = r.last().unwrap();
    assert_eq!(last.status, ZoneStatus::InsufficientData);
    assert_eq!(last.flux_shell_w_m2, None);
    assert_eq!(last.hot_face_c, None);
    // Silence: after three intervals every probe is stale.
    let mut out = Vec::new();
    for s in 120..200 {
        m.handle_timeout(Timestamp::from_epoch_s(f64::from(s)));
        while let Some(o) = m.poll_output() {
            let Output::ZoneState(ZoneState { report: r, .. }) = o else {
                continue;
            };
            out.push(r);
        }
    }
    let last = out.last().unwrap();
    assert!(
        last.probes.iter().all(|p| p.status == Health::Stale),
        "{last:?}"
    );
}
