//! The zone cycle: every `interval_s`, the latest valid reading of each
//! probe → profile fit → faces, fluxes, loss, source, rates → a `ZoneReport`.
//! Fixed capacity throughout: no heap allocation per cycle.

use heapless::{HistoryBuf, Vec as HVec};
use serde::Serialize;

use super::channel::{ChannelState, Health};
use crate::config::{Name, Settings, Zone, MAX_PROBES};
use crate::physics::fit::linear_slope;
use crate::physics::profile::{ProbeSample, QuadraticWall};
use crate::physics::surface::{surface_loss, SurfaceLoss};
use crate::time::Timestamp;

/// Schema tag of the zone-state payload.
pub const ZONE_SCHEMA: &str = "wallflux.zone/1";
/// A reading older than this many intervals is stale and not used.
pub const STALE_INTERVALS: f64 = 3.0;
/// Points kept per probe for the measured-rate regression.
pub const RATE_POINTS: usize = 64;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ZoneStatus {
    /// Every probe valid and the full model order fitted.
    Ok,
    /// Numbers published from fewer probes than configured.
    Degraded,
    /// Too few valid probes: no numbers.
    InsufficientData,
}

impl ZoneStatus {
    pub fn name(self) -> &'static str {
        match self {
            ZoneStatus::Ok => "ok",
            ZoneStatus::Degraded => "degraded",
            ZoneStatus::InsufficientData => "insufficient_data",
        }
    }
}

/// Standard uncertainties (1 σ) of the headline numbers, from the fit
/// covariance and the probes' standard uncertainties. The conductivity's own
/// uncertainty is not included.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Uncertainty {
    pub hot_face_c: f64,
    pub flux_hot_face_w_m2: f64,
    pub flux_shell_w_m2: f64,
    pub heat_loss_w: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProbeReport {
    pub channel: Name,
    pub depth_mm: f64,
    pub measured_c: Option<f64>,
    pub fitted_c: Option<f64>,
    pub rate_measured_c_per_h: Option<f64>,
    pub rate_model_c_per_h: Option<f64>,
    pub status: Health,
}

/// The zone state of DESIGN.md (MQTT payload and `analyze` line).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ZoneReport {
    pub schema: &'static str,
    pub time: Timestamp,
    pub zone: Name,
    pub model: &'static str,
    pub status: ZoneStatus,
    pub hot_face_c: Option<f64>,
    pub shell_c: Option<f64>,
    pub flux_hot_face_w_m2: Option<f64>,
    pub flux_shell_w_m2: Option<f64>,
    pub heat_loss_w: Option<f64>,
    pub source_w_m3: Option<f64>,
    pub fit_rms_c: Option<f64>,
    pub fit_degree: Option<u8>,
    /// Shell loss from the shell temperature alone (convection + radiation,
    /// or the configured combined coefficient), W/m².
    pub flux_surface_w_m2: Option<f64>,
    pub h_convection_w_m2k: Option<f64>,
    pub h_radiation_w_m2k: Option<f64>,
    /// (Fourier flux at the shell − surface estimate) / surface estimate, %.
    /// Large values point at a failed shell thermocouple, wet insulation or
    /// a wall that is not at the state the model assumes.
    pub balance_mismatch_pct: Option<f64>,
    pub probes_used: u8,
    pub uncertainty: Option<Uncertainty>,
    pub probes: HVec<ProbeReport, MAX_PROBES>,
}

/// Per-probe state kept between cycles.
#[derive(Debug, Clone)]
struct ProbeTrack {
    /// `(time_s since start, °C)` in time order, decimated.
    history: HistoryBuf<(f64, f64), RATE_POINTS>,
}

/// One zone's engine state.
#[derive(Debug, Clone)]
pub struct ZoneEngine {
    index: usize,
    pub next_due: Timestamp,
    tracks: HVec<ProbeTrack, MAX_PROBES>,
    /// Time origin of the rate histories (keeps the regression well scaled).
    origin: Timestamp,
    pub cycles: u64,
}

impl ZoneEngine {
    pub fn new(index: usize, zone: &Zone, start: Timestamp) -> Self {
        let mut tracks = HVec::new();
        for _ in zone.probes.iter().take(MAX_PROBES) {
            let _ = tracks.push(ProbeTrack {
                history: HistoryBuf::new(),
            });
        }
        ZoneEngine {
            index,
            next_due: start.plus_s(zone.interval_s),
            tracks,
            origin: start,
            cycles: 0,
        }
    }

    /// Runs one cycle at `now` over the channels' current states.
    pub fn cycle(
        &mut self,
        settings: &Settings,
        channels: &[ChannelState],
        now: Timestamp,
    ) -> ZoneReport {
        let zone = &settings.zones[self.index];
        self.cycles += 1;
        let max_age_s = STALE_INTERVALS * zone.interval_s;
        let spacing_s = zone.rate_window_s / (RATE_POINTS as f64 - 1.0);
        // The quadratic model has one layer (validated at load time).
        let layer = zone.layers[0];
        let wall = QuadraticWall {
            thickness_m: zone.thickness_m(),
            material: &settings.materials[layer.material].material,
        };

        let mut samples: HVec<ProbeSample, MAX_PROBES> = HVec::new();
        let mut probes: HVec<ProbeReport, MAX_PROBES> = HVec::new();
        for (probe, track) in zone.probes.iter().zip(self.tracks.iter_mut()) {
            let state = &channels[probe.channel];
            let (health, _) = state.health_at(now, max_age_s);
            let fresh = state.fresh(now, max_age_s);
            let mut rate = None;
            if let Some(r) = fresh {
                let t = r.time.since(self.origin);
                let newer = track
                    .history
                    .recent()
                    .is_none_or(|&(t0, _)| t - t0 >= spacing_s);
                if newer {
                    track.history.write((t, r.celsius));
                }
                rate = measured_rate_c_per_h(
                    &track.history,
                    now.since(self.origin),
                    zone.rate_window_s,
                    zone.interval_s,
                );
                let _ = samples.push(ProbeSample {
                    depth_m: probe.depth_m,
                    temp_c: r.celsius,
                    sigma_c: r.sigma_c,
                });
            }
            let _ = probes.push(ProbeReport {
                channel: settings.channels[probe.channel].name.clone(),
                depth_mm: probe.depth_m * 1000.0,
                measured_c: fresh.map(|r| r.celsius),
                fitted_c: None,
                rate_measured_c_per_h: rate,
                rate_model_c_per_h: None,
                status: if fresh.is_some() { Health::Ok } else { health },
            });
        }

        let mut report = ZoneReport {
            schema: ZONE_SCHEMA,
            time: now,
            zone: zone.name.clone(),
            model: zone.model.name(),
            status: ZoneStatus::InsufficientData,
            hot_face_c: None,
            shell_c: None,
            flux_hot_face_w_m2: None,
            flux_shell_w_m2: None,
            heat_loss_w: None,
            source_w_m3: None,
            fit_rms_c: None,
            fit_degree: None,
            flux_surface_w_m2: None,
            h_convection_w_m2k: None,
            h_radiation_w_m2k: None,
            balance_mismatch_pct: None,
            probes_used: samples.len() as u8,
            uncertainty: None,
            probes,
        };
        let Ok(sol) = wall.solve(&samples) else {
            return report;
        };
        let full_degree = if zone.probes.len() >= 3 { 2 } else { 1 };
        report.status = if samples.len() == zone.probes.len() && sol.degree == full_degree {
            ZoneStatus::Ok
        } else {
            ZoneStatus::Degraded
        };
        report.hot_face_c = Some(sol.hot_face_c);
        report.shell_c = Some(sol.shell_c);
        report.flux_hot_face_w_m2 = Some(sol.flux_hot_face_w_m2);
        report.flux_shell_w_m2 = Some(sol.flux_shell_w_m2);
        report.heat_loss_w = Some(sol.heat_loss_w(zone.area_m2));
        report.source_w_m3 = Some(sol.source_w_m3);
        report.fit_rms_c = Some(sol.fit_rms_c);
        report.fit_degree = Some(sol.degree as u8);
        let surface = shell_surface(zone, sol.shell_c);
        report.flux_surface_w_m2 = Some(surface.flux_w_m2);
        report.h_convection_w_m2k = Some(surface.h_convection_w_m2k);
        report.h_radiation_w_m2k = Some(surface.h_radiation_w_m2k);
        report.balance_mismatch_pct = mismatch_pct(sol.flux_shell_w_m2, surface.flux_w_m2);
        report.uncertainty = Some(Uncertainty {
            hot_face_c: sol.sigma_hot_face_c,
            flux_hot_face_w_m2: sol.sigma_flux_hot_face_w_m2,
            flux_shell_w_m2: sol.sigma_flux_shell_w_m2,
            heat_loss_w: sol.sigma_flux_shell_w_m2 * zone.area_m2,
        });
        for p in report.probes.iter_mut() {
            let x = p.depth_mm / 1000.0;
            p.fitted_c = Some(sol.fitted_c(x));
            p.rate_model_c_per_h = wall.model_rate_c_per_s(&sol, x).map(|r| r * 3600.0);
        }
        report
    }
}

/// Heat lost by the shell surface at `shell_c`: the configured combined
/// coefficient (all of it reported as convection), or the natural/forced
/// convection and radiation correlations of `physics::surface`.
pub fn shell_surface(zone: &Zone, shell_c: f64) -> SurfaceLoss {
    match zone.surface_h_w_m2k {
        Some(h) => SurfaceLoss {
            h_convection_w_m2k: h,
            h_radiation_w_m2k: 0.0,
            flux_w_m2: h * (shell_c - zone.surface.ambient_c),
        },
        None => surface_loss(shell_c, &zone.surface),
    }
}

/// Relative mismatch of two flux estimates, %; None when the reference is
/// too small for a percentage to mean anything (|q| < 1 W/m²).
fn mismatch_pct(fourier_w_m2: f64, surface_w_m2: f64) -> Option<f64> {
    if surface_w_m2.abs() < 1.0 || !fourier_w_m2.is_finite() {
        return None;
    }
    Some((fourier_w_m2 - surface_w_m2) / surface_w_m2 * 100.0)
}

/// Least-squares slope of the probe's history over the window ending at
/// `now_s`, °C/h. Needs at least three points spanning two intervals, so a
/// single step does not read as a rate.
fn measured_rate_c_per_h(
    history: &HistoryBuf<(f64, f64), RATE_POINTS>,
    now_s: f64,
    window_s: f64,
    interval_s: f64,
) -> Option<f64> {
    let mut ts: HVec<f64, RATE_POINTS> = HVec::new();
    let mut vs: HVec<f64, RATE_POINTS> = HVec::new();
    for &(t, v) in history.oldest_ordered() {
        if now_s - t <= window_s {
            let _ = ts.push(t);
            let _ = vs.push(v);
        }
    }
    let span = match (ts.first(), ts.last()) {
        (Some(a), Some(b)) => b - a,
        _ => return None,
    };
    if ts.len() < 3 || span < 2.0 * interval_s.min(window_s / 2.0) {
        return None;
    }
    linear_slope(&ts, &vs).map(|(slope, _)| slope * 3600.0)
}
