//! The zone cycle: every `interval_s`, the latest valid reading of each
//! probe → profile fit → faces, fluxes, loss, source, rates → a `ZoneReport`.
//! Fixed capacity throughout: no heap allocation per cycle.

use heapless::{HistoryBuf, Vec as HVec};
use serde::Serialize;

use super::channel::{ChannelState, Health, Reading};
use super::lining::Baseline;
use super::wall::Wall;
use crate::config::{Model, NamedMaterial};
use crate::config::{Name, Settings, Zone, MAX_PROBES};
use crate::physics::fit::linear_slope;
use crate::physics::layered::{HotFaceReading, ModelCheck, MAX_LAYERS};
use crate::physics::profile::{heat_loss_w, ProbeSample};
use crate::physics::surface::{surface_loss, SurfaceLoss};
use crate::physics::transient::{
    Limit, TransientError, TransientEstimator, TransientLayer, TransientSettings,
};
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
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Uncertainty {
    pub hot_face_c: f64,
    pub shell_c: f64,
    pub flux_hot_face_w_m2: f64,
    pub flux_shell_w_m2: f64,
    pub heat_loss_w: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interface_c: Option<HVec<f64, MAX_LAYERS>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thermal_resistance_m2k_w: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_remaining_mm: Option<f64>,
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
    /// Rate of heat storage in the wall from the probes' measured rates,
    /// ∫ ρ c_p ∂T/∂t dx (trapezoid over the probes, each end value held to
    /// its face), W/m². Positive: the wall is heating.
    pub stored_w_m2: Option<f64>,
    /// Interface temperatures hot to cold (layered model), °C.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interface_c: Option<HVec<f64, MAX_LAYERS>>,
    /// Thermal resistance hot face → shell (layered model), m²K/W.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thermal_resistance_m2k_w: Option<f64>,
    /// `consistent`, `contradicted` or `untested`: do the probes agree with
    /// the model within their uncertainties (χ² against its 3σ quantile)?
    pub model_check: Option<&'static str>,
    /// Why, in words, when the check says contradicted.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub model_note: Option<&'static str>,
    /// Transient model: the estimated hot-face rate, °C/h.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hot_face_rate_c_per_h: Option<f64>,
    /// Transient model: windowed mean normalised innovation squared per
    /// reading (about 1 when the model and the readings agree).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub filter_nis: Option<f64>,
    /// Transient model: the profile run ahead under the hot-face trend.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub forecast: Option<HVec<ForecastReport, 8>>,
    /// Transient model: hours until each limit is reached, within the
    /// longest forecast horizon.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub time_to_limit_h: Option<HVec<LimitReport, 9>>,
    /// Layered model with a hot-face reading: the measured thermal
    /// resistance (T_hot − T_shell)/q against its baseline learned over
    /// `baseline_days` at comparable hot-face temperature, % (negative: less
    /// insulation than at commissioning: wear, cracks, wet insulation).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub resistance_change_pct: Option<f64>,
    /// Layered model with a hot-face reading: the hot-side layer's
    /// remaining thickness that best explains the probes, mm.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_remaining_mm: Option<f64>,
    pub probes_used: u8,
    pub uncertainty: Option<Uncertainty>,
    pub probes: HVec<ProbeReport, MAX_PROBES>,
    /// Layered model with a hot-face reading: the lining baseline's state
    /// and dates (set by the monitor after the cycle).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_baseline: Option<super::lining::BaselineReport>,
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
    /// Zone-level faults of each probe from the last cycle (stuck, outlier).
    pub diagnosis: HVec<Option<(Health, &'static str)>, MAX_PROBES>,
    /// The transient model's estimator (model = "transient"), or why it
    /// could not be built.
    transient: Option<Result<Box<TransientEstimator>, TransientError>>,
    last_step: Option<Timestamp>,
    /// Learned thermal-resistance baseline (layered model).
    pub baseline: Baseline,
}

impl ZoneEngine {
    pub fn new(index: usize, zone: &Zone, materials: &[NamedMaterial], start: Timestamp) -> Self {
        // The transient estimator is built once (its covariance is large):
        // no allocation per cycle.
        let transient = (zone.model == Model::Transient).then(|| {
            let layers: Vec<TransientLayer<'_>> = zone
                .layers
                .iter()
                .filter_map(|l| {
                    materials.get(l.material).map(|m| TransientLayer {
                        material: &m.material,
                        thickness_m: l.thickness_m,
                    })
                })
                .collect();
            let settings = TransientSettings {
                cells_per_layer: zone.cells_per_layer,
                ..TransientSettings::default()
            };
            TransientEstimator::new(&layers, zone.surface, settings).map(Box::new)
        });
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
            diagnosis: HVec::new(),
            transient,
            last_step: None,
            baseline: Baseline::default(),
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
        let wall = Wall::new(zone, settings);

        // 1. Fresh readings and their histories.
        let mut fresh: HVec<Option<Reading>, MAX_PROBES> = HVec::new();
        let mut rates: HVec<Option<f64>, MAX_PROBES> = HVec::new();
        let mut spans: HVec<Option<f64>, MAX_PROBES> = HVec::new();
        let now_s = now.since(self.origin);
        for (probe, track) in zone.probes.iter().zip(self.tracks.iter_mut()) {
            let r = channels[probe.channel].fresh(now, max_age_s);
            if let Some(r) = r {
                let t = r.time.since(self.origin);
                let newer = track
                    .history
                    .recent()
                    .is_none_or(|&(t0, _)| t - t0 >= spacing_s);
                if newer {
                    track.history.write((t, r.celsius));
                }
            }
            let _ = rates.push(r.and_then(|_| {
                measured_rate_c_per_h(&track.history, now_s, zone.rate_window_s, zone.interval_s)
            }));
            let _ = spans
                .push(r.and_then(|_| history_span_c(&track.history, now_s, zone.rate_window_s)));
            let _ = fresh.push(r);
        }

        // 2. Diagnostics the zone can make and a channel alone cannot.
        let mut depths: HVec<f64, MAX_PROBES> = HVec::new();
        for p in zone.probes.iter().take(MAX_PROBES) {
            let _ = depths.push(p.depth_m);
        }
        let mut diagnosis: HVec<Option<(Health, &'static str)>, MAX_PROBES> = HVec::new();
        for i in 0..fresh.len() {
            let _ = diagnosis.push(stuck(&spans, &depths, i).then_some((
                Health::Stuck,
                "the same value repeated exactly while a neighbouring probe changes",
            )));
        }
        let mut samples: HVec<ProbeSample, MAX_PROBES> = HVec::new();
        let mut sample_probe: HVec<usize, MAX_PROBES> = HVec::new();
        for (i, (probe, r)) in zone.probes.iter().zip(&fresh).enumerate() {
            if let (Some(r), None) = (r, diagnosis[i]) {
                let _ = samples.push(ProbeSample {
                    depth_m: probe.depth_m,
                    temp_c: r.celsius,
                    sigma_c: r.sigma_c,
                });
                let _ = sample_probe.push(i);
            }
        }
        // Outliers only while the wall is near steady state: in a
        // transient the model's own misfit (steep curvature near the hot
        // face) would be blamed on a healthy probe. So every probe must be
        // changing slowly, the suspect too (a probe that jumped is judged
        // once its rate window has passed the jump).
        let mut sample_rates: HVec<Option<f64>, MAX_PROBES> = HVec::new();
        for &i in &sample_probe {
            let _ = sample_rates.push(rates[i]);
        }
        if let Some(k) = wall
            .as_ref()
            .and_then(|w| outlier(w, &samples, &sample_rates))
        {
            diagnosis[sample_probe[k]] = Some((
                Health::Outlier,
                "inconsistent with the zone's other probes (leave-one-out residual)",
            ));
            samples.remove(k);
        }

        let mut probes: HVec<ProbeReport, MAX_PROBES> = HVec::new();
        for (i, probe) in zone.probes.iter().enumerate() {
            let (health, _) = channels[probe.channel].health_at(now, max_age_s);
            let status = match (fresh[i], diagnosis[i]) {
                (_, Some((h, _))) => h,
                (Some(_), None) => Health::Ok,
                (None, None) => health,
            };
            let _ = probes.push(ProbeReport {
                channel: settings.channels[probe.channel].name.clone(),
                depth_mm: probe.depth_m * 1000.0,
                measured_c: fresh[i].map(|r| r.celsius),
                fitted_c: None,
                rate_measured_c_per_h: rates[i],
                rate_model_c_per_h: None,
                status,
            });
        }
        self.diagnosis = diagnosis;

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
            stored_w_m2: None,
            interface_c: None,
            thermal_resistance_m2k_w: None,
            model_check: None,
            model_note: None,
            hot_face_rate_c_per_h: None,
            filter_nis: None,
            forecast: None,
            time_to_limit_h: None,
            resistance_change_pct: None,
            lining_remaining_mm: None,
            probes_used: samples.len() as u8,
            uncertainty: None,
            probes,
            lining_baseline: None,
        };
        if zone.model == Model::Transient {
            self.transient_cycle(settings, &samples, &mut report, now);
            return report;
        }
        let Some(wall) = wall else {
            return report;
        };
        report.stored_w_m2 = stored_w_m2(&report.probes, &wall);
        let Some(sol) = wall.solve(&samples) else {
            return report;
        };
        let full_order = match zone.model {
            Model::Quadratic => sol.degree == Some(if zone.probes.len() >= 3 { 2 } else { 1 }),
            Model::Layered | Model::Transient => true,
        };
        // Data that contradict the model (residuals beyond what the probes'
        // uncertainties allow: the wall is not at steady state, or a probe
        // or the model is wrong) degrade the zone, with the reason.
        report.model_check = Some(check_name(sol.check));
        report.model_note = (sol.check == ModelCheck::Contradicted).then(|| {
            let fast = report
                .probes
                .iter()
                .filter_map(|p| p.rate_measured_c_per_h)
                .any(|r| r.abs() > FAST_RATE_C_PER_H);
            if fast {
                "the probes disagree with the model beyond their uncertainty while heating or cooling fast: the wall is not at steady state"
            } else {
                "the probes disagree with the model beyond their uncertainty: check the probe depths, the materials, or a probe"
            }
        });
        report.status = if samples.len() == zone.probes.len()
            && full_order
            && sol.check != ModelCheck::Contradicted
        {
            ZoneStatus::Ok
        } else {
            ZoneStatus::Degraded
        };
        report.hot_face_c = Some(sol.hot_face_c);
        report.shell_c = Some(sol.shell_c);
        report.flux_hot_face_w_m2 = Some(sol.flux_hot_face_w_m2);
        report.flux_shell_w_m2 = Some(sol.flux_shell_w_m2);
        report.heat_loss_w = Some(heat_loss_w(sol.flux_shell_w_m2, zone.area_m2));
        report.source_w_m3 = sol.source_w_m3;
        report.fit_rms_c = Some(sol.fit_rms_c);
        report.fit_degree = sol.degree;
        if !sol.interface_c.is_empty() {
            report.interface_c = Some(sol.interface_c.iter().map(|&(t, _)| t).collect());
        }
        report.thermal_resistance_m2k_w = sol.resistance_m2k_w.map(|(r, _)| r);
        // Lining condition needs a reading at the hot face: steady probes
        // alone cannot tell a thinner lining from a hotter face (see
        // `LayeredWall::remaining_hot_layer`). With one, the measured
        // resistance (T_hot,measured − T_shell) / q is compared with its
        // commissioning baseline, and the hot layer is sized.
        let mut lining_sigma_mm = None;
        if let (Wall::Layered(l), Some(hf)) = (&wall, zone.hot_face_channel) {
            if let Some(reading) = channels.get(hf).and_then(|c| c.fresh(now, max_age_s)) {
                if sol.flux_shell_w_m2.abs() > 1.0 {
                    let r = (reading.celsius - sol.shell_c) / sol.flux_shell_w_m2;
                    if sol.check == ModelCheck::Consistent {
                        self.baseline
                            .record(now, zone.baseline_days, reading.celsius, r);
                    }
                    report.resistance_change_pct =
                        self.baseline
                            .change_pct(now, zone.baseline_days, reading.celsius, r);
                }
                let hot = HotFaceReading {
                    temp_c: reading.celsius,
                    sigma_c: reading.sigma_c,
                };
                if let Ok(w) = l.remaining_hot_layer(&samples, hot) {
                    report.lining_remaining_mm = Some(w.remaining_mm);
                    lining_sigma_mm = Some(w.sigma_mm);
                }
            }
        }
        let surface = shell_surface(zone, sol.shell_c);
        report.flux_surface_w_m2 = Some(surface.flux_w_m2);
        report.h_convection_w_m2k = Some(surface.h_convection_w_m2k);
        report.h_radiation_w_m2k = Some(surface.h_radiation_w_m2k);
        report.balance_mismatch_pct = mismatch_pct(sol.flux_shell_w_m2, surface.flux_w_m2);
        report.uncertainty = Some(Uncertainty {
            hot_face_c: sol.sigma_hot_face_c,
            shell_c: sol.sigma_shell_c,
            flux_hot_face_w_m2: sol.sigma_flux_hot_face_w_m2,
            flux_shell_w_m2: sol.sigma_flux_shell_w_m2,
            heat_loss_w: sol.sigma_flux_shell_w_m2 * zone.area_m2,
            interface_c: (!sol.interface_c.is_empty())
                .then(|| sol.interface_c.iter().map(|&(_, s)| s).collect()),
            thermal_resistance_m2k_w: sol.resistance_m2k_w.map(|(_, s)| s),
            lining_remaining_mm: lining_sigma_mm,
        });
        for p in report.probes.iter_mut() {
            let x = p.depth_mm / 1000.0;
            p.fitted_c = wall.fitted(&sol, x).map(|(t, _)| t);
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

/// ∫₀ᴸ ρ c_p ∂T/∂t dx from the valid probes' measured rates (trapezoid in
/// depth order; the shallowest and deepest values held to the faces).
/// Needs two probes with rates.
fn stored_w_m2(probes: &[ProbeReport], wall: &Wall<'_>) -> Option<f64> {
    let thickness_m = wall.thickness_m();
    let mut pts: HVec<(f64, f64), MAX_PROBES> = HVec::new();
    for p in probes.iter().filter(|p| p.status == Health::Ok) {
        let x = p.depth_mm / 1000.0;
        if let (Some(rate), Some(t), Some(m)) =
            (p.rate_measured_c_per_h, p.measured_c, wall.material_at(x))
        {
            let _ = pts.push((x, m.heat_capacity_j_m3k(t) * rate / 3600.0));
        }
    }
    if pts.len() < 2 {
        return None;
    }
    pts.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    let (first, last) = (pts[0], pts[pts.len() - 1]);
    let mut sum = first.1 * first.0 + last.1 * (thickness_m - last.0);
    for w in pts.windows(2) {
        sum += 0.5 * (w[0].1 + w[1].1) * (w[1].0 - w[0].0);
    }
    Some(sum)
}

/// A probe rate beyond this makes a contradicted steady model read as
/// "not at steady state" (a threshold of ours), °C/h.
pub const FAST_RATE_C_PER_H: f64 = 5.0;

fn check_name(c: ModelCheck) -> &'static str {
    match c {
        ModelCheck::Consistent => "consistent",
        ModelCheck::Contradicted => "contradicted",
        ModelCheck::Untested => "untested",
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

impl ZoneEngine {
    /// The transient model's cycle: predict over the interval, assimilate
    /// the valid probes, report the estimate, forecasts and times to limits.
    fn transient_cycle(
        &mut self,
        settings: &Settings,
        samples: &[ProbeSample],
        report: &mut ZoneReport,
        now: Timestamp,
    ) {
        let zone = &settings.zones[self.index];
        let dt = self.last_step.map_or(0.0, |t| now.since(t).max(0.0));
        self.last_step = Some(now);
        let est = match self.transient.as_mut() {
            Some(Ok(e)) => e,
            Some(Err(_)) | None => {
                report.model_note = Some("the transient model could not be built for this wall");
                return;
            }
        };
        let step = match est.step(dt, samples) {
            Ok(s) => s,
            Err(_) => return,
        };
        if !est.is_initialised() || samples.is_empty() {
            return;
        }
        let (hot, s_hot) = est.hot_face_c();
        let (shell, s_shell) = est.shell_c();
        let (q0, s_q0) = est.flux_hot_face_w_m2();
        let (ql, s_ql) = est.flux_shell_w_m2();
        let (stored, _) = est.stored_w_m2();
        let l = zone.thickness_m();
        report.status = if samples.len() == zone.probes.len() && !step.reset {
            ZoneStatus::Ok
        } else {
            ZoneStatus::Degraded
        };
        report.hot_face_c = Some(hot);
        report.shell_c = Some(shell);
        report.flux_hot_face_w_m2 = Some(q0);
        report.flux_shell_w_m2 = Some(ql);
        report.heat_loss_w = Some(heat_loss_w(ql, zone.area_m2));
        report.source_w_m3 = Some((ql - q0) / l);
        report.stored_w_m2 = Some(stored);
        report.hot_face_rate_c_per_h = Some(est.hot_face_rate_c_per_h().0);
        report.filter_nis = Some(est.nis());
        if step.reset {
            report.model_note = Some("the estimator was reset: it had diverged from the readings (check the materials and probe depths)");
        }
        let interfaces = est.interface_c();
        if !interfaces.is_empty() {
            report.interface_c = Some(interfaces.iter().map(|&(t, _)| t).collect());
        }
        let mut sq = 0.0;
        for p in report.probes.iter_mut() {
            let x = p.depth_mm / 1000.0;
            let fitted = est.temperature_at(x);
            p.fitted_c = Some(fitted);
            p.rate_model_c_per_h = Some(est.rate_c_per_h_at(x));
            if let (Some(m), Health::Ok) = (p.measured_c, p.status) {
                sq += (m - fitted) * (m - fitted);
            }
        }
        report.fit_rms_c = Some((sq / samples.len() as f64).sqrt());
        let surface = shell_surface(zone, shell);
        report.flux_surface_w_m2 = Some(surface.flux_w_m2);
        report.h_convection_w_m2k = Some(surface.h_convection_w_m2k);
        report.h_radiation_w_m2k = Some(surface.h_radiation_w_m2k);
        report.balance_mismatch_pct = mismatch_pct(ql, surface.flux_w_m2);
        report.uncertainty = Some(Uncertainty {
            hot_face_c: s_hot,
            shell_c: s_shell,
            flux_hot_face_w_m2: s_q0,
            flux_shell_w_m2: s_ql,
            heat_loss_w: s_ql * zone.area_m2,
            interface_c: (!interfaces.is_empty())
                .then(|| interfaces.iter().map(|&(_, s)| s).collect()),
            thermal_resistance_m2k_w: None,
            lining_remaining_mm: None,
        });
        // Forecasts under the current hot-face trend, capped at the hot
        // layer's service limit and the firing set-point.
        let cap = zone
            .layers
            .first()
            .and_then(|l| settings.materials[l.material].material.max_service_c)
            .into_iter()
            .chain(zone.firing_setpoint_c)
            .fold(f64::INFINITY, f64::min);
        let mut forecast: HVec<ForecastReport, 8> = HVec::new();
        for &h in zone.forecast_h.iter().take(8) {
            if let Some(f) = est.forecast(h * 3600.0, cap) {
                let _ = forecast.push(ForecastReport {
                    horizon_h: h,
                    shell_c: f.shell_c,
                    hot_face_c: f.hot_face_c,
                    interface_c: f.interface_c.clone(),
                });
            }
        }
        report.forecast = Some(forecast);
        let longest_s = zone.forecast_h.iter().copied().fold(0.0, f64::max) * 3600.0;
        let mut limits: HVec<LimitReport, 9> = HVec::new();
        let touch = settings
            .alarms
            .iter()
            .find(|a| {
                a.builtin
                    && a.spec.kind == crate::monitor::alarm::AlarmKind::High
                    && a.target
                        == (crate::config::AlarmTarget::Zone {
                            zone: self.index,
                            quantity: crate::config::ZoneQuantity::ShellC,
                        })
            })
            .map_or(crate::config::DEFAULT_SHELL_TOUCH_C, |a| a.spec.setpoint);
        let _ = limits.push(LimitReport {
            limit: "shell_touch",
            index: None,
            limit_c: touch,
            hours: est.time_to_limit_h(Limit::ShellC(touch), longest_s, cap),
        });
        for (i, layer) in zone.layers.iter().enumerate().skip(1) {
            if let Some(limit_c) = settings.materials[layer.material].material.max_service_c {
                let _ = limits.push(LimitReport {
                    limit: "interface_service",
                    index: Some(i - 1),
                    limit_c,
                    hours: est.time_to_limit_h(
                        Limit::InterfaceC {
                            index: i - 1,
                            limit_c,
                        },
                        longest_s,
                        cap,
                    ),
                });
            }
        }
        report.time_to_limit_h = Some(limits);
    }
}

/// One forecast of the transient model.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ForecastReport {
    pub horizon_h: f64,
    pub shell_c: f64,
    pub hot_face_c: f64,
    pub interface_c: HVec<f64, MAX_LAYERS>,
}

/// When a limit is reached under the forecast (None: not within the
/// longest horizon).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitReport {
    /// `shell_touch` or `interface_service`.
    pub limit: &'static str,
    /// The interface (0 = between the first two layers).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub index: Option<usize>,
    pub limit_c: f64,
    pub hours: Option<f64>,
}

/// A probe is stuck when it repeated exactly the same value over the
/// window (a live thermocouple always shows some noise or drift; a frozen
/// input module or a dead converter repeats its last value bit for bit)…
pub const STUCK_SPAN_C: f64 = 1e-9;
/// …while a probe next to it in depth moved by more than this, °C. (A
/// shell probe may legitimately sit still for hours while the lining
/// heats, so "the others move" alone is not enough.)
pub const STUCK_OTHERS_C: f64 = 5.0;
/// Readings in the window before a span is judged.
pub const MIN_SPAN_POINTS: usize = 5;
/// An outlier's leave-one-out studentised residual exceeds this (a
/// threshold of ours: five standard uncertainties).
pub const OUTLIER_T: f64 = 5.0;

/// Range (max − min) of a probe's history over the window, when the
/// history covers at least half of it.
fn history_span_c(
    history: &HistoryBuf<(f64, f64), RATE_POINTS>,
    now_s: f64,
    window_s: f64,
) -> Option<f64> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    let mut first = None;
    let mut n = 0;
    for &(t, v) in history.oldest_ordered() {
        if now_s - t <= window_s {
            first.get_or_insert(t);
            lo = lo.min(v);
            hi = hi.max(v);
            n += 1;
        }
    }
    // Enough distinct readings to call it a span (a reading that was not
    // renewed is not a repeated one).
    first
        .filter(|&t0| n >= MIN_SPAN_POINTS && now_s - t0 >= window_s / 2.0)
        .map(|_| hi - lo)
}

/// Probe `i` stuck: exactly flat while its neighbours in depth moved.
fn stuck(spans: &[Option<f64>], depths: &[f64], i: usize) -> bool {
    let Some(own) = spans[i] else { return false };
    if own > STUCK_SPAN_C {
        return false;
    }
    // The nearest shallower and deeper probes.
    let d = depths[i];
    let nearest = |deeper: bool| {
        (0..spans.len())
            .filter(|&j| j != i && if deeper { depths[j] > d } else { depths[j] < d })
            .min_by(|&a, &b| (depths[a] - d).abs().total_cmp(&(depths[b] - d).abs()))
    };
    // Every neighbour it has moved (one jumping neighbour is its own fault).
    let neighbours: HVec<usize, 2> = [nearest(false), nearest(true)]
        .into_iter()
        .flatten()
        .collect();
    !neighbours.is_empty()
        && neighbours
            .iter()
            .all(|&j| spans[j].is_some_and(|s| s > STUCK_OTHERS_C))
}

/// The one sample inconsistent with the others, if any. Each sample is
/// predicted by the fit of the others and its studentised residual
/// r / √(σᵢ² + var ŷ) computed; the worst is an outlier when it exceeds
/// `OUTLIER_T` and the fit without it is itself consistent (every
/// standardised residual below 3). That second test needs a redundant fit
/// without it, so five samples or more: a profile the model cannot follow
/// (a fast transient) spreads over all probes and is not blamed on one.
fn outlier(wall: &Wall<'_>, samples: &[ProbeSample], rates: &[Option<f64>]) -> Option<usize> {
    // The fit without the suspect must itself be redundant: more samples
    // than the model's parameters (quadratic 3, layered 2).
    let params = match wall {
        Wall::Quadratic(_) => 3,
        Wall::Layered(_) => 2,
    };
    if samples.len() < params + 2 {
        return None;
    }
    let without = |i: usize| {
        let mut rest: HVec<ProbeSample, MAX_PROBES> = HVec::new();
        for (j, s) in samples.iter().enumerate() {
            if j != i {
                let _ = rest.push(*s);
            }
        }
        rest
    };
    // Studentised leave-one-out residuals, then the largest first: the
    // first whose removal leaves a consistent fit is the outlier (the
    // largest alone can be a well-behaved probe that the bad one drags).
    let mut t: HVec<(usize, f64), MAX_PROBES> = HVec::new();
    for (i, &s) in samples.iter().enumerate() {
        let Some((y, sd)) = wall
            .solve(&without(i))
            .and_then(|f| wall.fitted(&f, s.depth_m))
        else {
            continue;
        };
        let var = s.sigma_c * s.sigma_c + sd * sd;
        let _ = t.push((i, ((s.temp_c - y) / var.sqrt()).abs()));
    }
    t.sort_unstable_by(|a, b| b.1.total_cmp(&a.1));
    t.iter()
        .take_while(|(_, ti)| *ti > OUTLIER_T)
        .filter(|_| {
            rates
                .iter()
                .all(|r| r.is_some_and(|r| r.abs() <= FAST_RATE_C_PER_H))
        })
        .find_map(|&(i, _)| {
            let rest = without(i);
            let fit = wall.solve(&rest)?;
            rest.iter()
                .all(|s| {
                    wall.fitted(&fit, s.depth_m)
                        .is_some_and(|(y, _)| ((s.temp_c - y) / s.sigma_c).abs() < 3.0)
                })
                .then_some(i)
        })
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
