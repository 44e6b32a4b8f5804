//! The `transient` model: the finite-volume heat equation of the wall with
//! a Kalman filter over its node temperatures and the hot face
//! (`physics::transient`), stepped over each interval and corrected by the
//! valid probes; forecasts and times to limits under the hot face's trend.

use heapless::Vec as HVec;
use serde::Serialize;

use super::{note, ModelError, ModelInput, ZoneModel};
use crate::config::{Model, NamedMaterial, Zone, MAX_FORECASTS, MAX_PROBES};
use crate::monitor::channel::Health;
use crate::monitor::lining::Baseline;
use crate::monitor::zone::{
    shell_surface, transient_shell, Uncertainty, UncertaintyBudget, ZoneReport, ZoneStatus,
};
use crate::physics::layered::MAX_LAYERS;
use crate::physics::profile::heat_loss_w;
use crate::physics::transient::{
    Limit, TransientError, TransientEstimator, TransientLayer, TransientSettings, MAX_NODES,
};
use crate::physics::uncertainty::{
    transient_budget, TransientInputs, TransientLayerInput, OUT_FLUX_HOT_FACE, OUT_FLUX_SHELL,
    OUT_HOT_FACE, OUT_SHELL,
};
use crate::time::Timestamp;

use super::steady::mismatch_pct;

/// Most times to limits in a report: the shell's touch limit and one
/// service limit per interface.
pub const MAX_LIMITS: usize = MAX_LAYERS;

/// The filter had diverged from the readings and started afresh.
pub const NOTE_RESET: &str = "the estimator was reset: it had diverged from the readings (check the materials and probe depths)";

/// The transient model of one zone: its estimator (built once, its
/// covariance is large: no allocation per cycle), or why it could not be
/// built.
#[derive(Debug)]
pub struct Transient {
    estimator: Result<Box<TransientEstimator>, TransientError>,
    last_step: Option<Timestamp>,
}

impl Transient {
    pub fn new(zone: &Zone, materials: &[NamedMaterial]) -> Self {
        let layers: Vec<TransientLayer<'_>> = zone
            .layers
            .iter()
            .filter_map(|l| {
                materials.get(l.material).map(|m| TransientLayer {
                    material: &m.material,
                    thickness_m: l.thickness_m,
                    contact_m2k_w: l.contact_m2k_w,
                })
            })
            .collect();
        let settings = TransientSettings {
            cells_per_layer: zone.cells_per_layer,
            ..TransientSettings::default()
        };
        let depths: Vec<f64> = zone.probes.iter().map(|p| p.depth_m).collect();
        let estimator = TransientEstimator::new(&layers, transient_shell(zone), settings)
            .map(|e| Box::new(e.graded(&depths, zone.interval_s)));
        Transient {
            estimator,
            last_step: None,
        }
    }
}

impl ZoneModel for Transient {
    fn model(&self) -> Model {
        Model::Transient
    }

    /// Predicts over the interval, assimilates the valid probes, reports
    /// the estimate, forecasts and times to limits.
    fn estimate(
        &mut self,
        input: &ModelInput<'_>,
        _baseline: &mut Baseline,
        report: &mut ZoneReport,
    ) -> Result<(), ModelError> {
        let ModelInput {
            settings,
            zone,
            samples,
            depth_sigma_m,
            now,
            ..
        } = *input;
        let dt = self.last_step.map_or(0.0, |t| now.since(t).max(0.0));
        self.last_step = Some(now);
        let est = self.estimator.as_mut().map_err(|e| e.clone())?;
        let step = est.step(dt, samples)?;
        if !est.is_initialised() || samples.is_empty() {
            return Err(ModelError::NoReadings);
        }
        let (hot, s_hot) = est.hot_face_c();
        let (shell, s_shell) = est.shell_c();
        let (q0, s_q0) = est.flux_hot_face_w_m2();
        let (ql, s_ql) = est.flux_shell_w_m2();
        let (stored, _) = est.stored_w_m2();
        let l = zone.thickness_m();
        // A filter that had diverged from the readings and was started
        // afresh cannot vouch for this cycle's numbers.
        report.status = if step.reset {
            ZoneStatus::Contradicted
        } else if samples.len() == zone.probes.len() {
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
        report.filter_nis = Some(est.nis()).filter(|n| n.is_finite());
        if step.reset {
            report.model_note = Some(note(NOTE_RESET));
        }
        let interfaces = est.interface_c();
        if !interfaces.is_empty() {
            report.interface_c = Some(interfaces.iter().map(|&(t, _)| t).collect());
            let cold = est.interface_cold_c();
            if cold.iter().any(Option::is_some) {
                report.interface_cold_c = Some(cold.iter().map(|c| c.map(|(t, _)| t)).collect());
            }
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
        let mut u = Uncertainty {
            hot_face_c: s_hot,
            shell_c: s_shell,
            flux_hot_face_w_m2: s_q0,
            flux_shell_w_m2: s_ql,
            heat_loss_w: s_ql * zone.area_m2,
            interface_c: (!interfaces.is_empty())
                .then(|| interfaces.iter().map(|&(_, s)| s).collect()),
            thermal_resistance_m2k_w: None,
            lining_remaining_mm: None,
            budget: None,
            readings_only: [s_hot, s_shell, s_ql],
        };
        // Conductivity, heat capacity and probe depths on top of the
        // filter's σ (the readings' part): physics::uncertainty.
        // Each collected from a source of its own capacity: the zone's
        // layers, the model's nodes, the cycle's samples.
        let layers: HVec<TransientLayerInput<'_>, MAX_LAYERS> = zone
            .layers
            .iter()
            .map(|l| {
                let m = &settings.materials[l.material];
                TransientLayerInput {
                    material: &m.material,
                    thickness_m: l.thickness_m,
                    conductivity_rel: m.conductivity_uncertainty_pct / 100.0,
                    heat_capacity_rel: m.heat_capacity_uncertainty_pct / 100.0,
                }
            })
            .collect();
        let nodes: HVec<(f64, f64, f64), MAX_NODES> = est
            .profile()
            .iter()
            .map(|n| (n.depth_m, n.temp_c, n.rate_c_per_h / 3600.0))
            .collect();
        let probe_depths: HVec<(f64, f64), MAX_PROBES> = samples
            .iter()
            .zip(depth_sigma_m)
            .map(|(s, &sd)| (s.depth_m, sd))
            .collect();
        let inputs = TransientInputs {
            layers: &layers,
            nodes: &nodes,
            probes: &probe_depths,
            filter_sigma: [s_hot, s_shell, s_q0, s_ql],
            flux_hot_face_w_m2: q0,
            flux_shell_w_m2: ql,
            shell_slope_w_m2k: est.model().shell().flux_slope_w_m2k(shell),
        };
        if let Some(b) = transient_budget(&inputs) {
            u.hot_face_c = b.total(OUT_HOT_FACE);
            u.shell_c = b.total(OUT_SHELL);
            u.flux_hot_face_w_m2 = b.total(OUT_FLUX_HOT_FACE);
            u.flux_shell_w_m2 = b.total(OUT_FLUX_SHELL);
            u.heat_loss_w = b.total(OUT_FLUX_SHELL) * zone.area_m2;
            u.budget = Some(UncertaintyBudget::of(&b, true));
        }
        report.uncertainty = Some(u);
        // Forecasts under the current hot-face trend, capped at the hot
        // layer's service limit and the firing set-point.
        let cap = zone
            .layers
            .first()
            .and_then(|l| settings.materials[l.material].material.max_service_c)
            .into_iter()
            .chain(zone.firing_setpoint_c)
            .fold(f64::INFINITY, f64::min);
        // One per configured horizon, of which there are at most MAX_FORECASTS.
        let forecast: HVec<ForecastReport, MAX_FORECASTS> = zone
            .forecast_h
            .iter()
            .filter_map(|&h| {
                est.forecast(h * 3600.0, cap).map(|f| ForecastReport {
                    horizon_h: h,
                    shell_c: f.shell_c,
                    hot_face_c: f.hot_face_c,
                    interface_c: f.interface_c.clone(),
                })
            })
            .collect();
        report.forecast = Some(forecast);
        let longest_s = zone.forecast_h.iter().copied().fold(0.0, f64::max) * 3600.0;
        let touch = settings
            .alarms
            .iter()
            .find(|a| {
                a.builtin
                    && a.spec.kind == crate::monitor::alarm::AlarmKind::High
                    && a.target
                        == (crate::config::AlarmTarget::Zone {
                            zone: input.zone_id,
                            quantity: crate::config::ZoneQuantity::ShellC,
                        })
            })
            .map_or(crate::config::DEFAULT_SHELL_TOUCH_C, |a| a.spec.setpoint);
        let shell_touch = LimitReport {
            limit: LimitKind::ShellTouch,
            index: None,
            limit_c: touch,
            hours: est.time_to_limit_h(Limit::ShellC(touch), longest_s, cap),
        };
        // The shell and one per interface: at most MAX_LAYERS = MAX_LIMITS.
        let interfaces = zone
            .layers
            .iter()
            .enumerate()
            .skip(1)
            .filter_map(|(i, layer)| {
                let limit_c = settings.materials[layer.material].material.max_service_c?;
                Some(LimitReport {
                    limit: LimitKind::InterfaceService,
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
                })
            });
        let limits: HVec<LimitReport, MAX_LIMITS> =
            core::iter::once(shell_touch).chain(interfaces).collect();
        report.time_to_limit_h = Some(limits);
        Ok(())
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

crate::word_enum! {
    /// Which limit a time to limit is for.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum LimitKind {
        /// The shell's touch limit (the built-in shell-temperature alarm's
        /// set-point).
        ShellTouch = "shell_touch",
        /// The `max_service_c` of the layer behind an interface.
        InterfaceService = "interface_service",
    }
}

/// When a limit is reached under the forecast (None: not within the
/// longest horizon).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitReport {
    pub limit: LimitKind,
    /// The interface (0 = between the first two layers).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub index: Option<usize>,
    pub limit_c: f64,
    pub hours: Option<f64>,
}
