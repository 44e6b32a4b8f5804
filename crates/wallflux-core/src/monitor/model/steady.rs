//! The steady models, `quadratic` and `layered`: one fit per cycle of the
//! wall behind [`Wall`] to the cycle's valid samples, checked against the
//! probes' uncertainties and the probes' measured rates; the lining's
//! resistance against its baseline (layered, with a hot-face reading);
//! the complete uncertainty budget.

use heapless::Vec as HVec;

use super::{note, ModelError, ModelInput, ZoneModel};
use crate::config::{Model, MAX_PROBES};
use crate::monitor::channel::Health;
use crate::monitor::lining::Baseline;
use crate::monitor::wall::{wear_sigma_mm, Wall};
use crate::monitor::zone::{
    changing_fast, shell_surface, ProbeReport, Uncertainty, UncertaintyBudget, ZoneReport,
    ZoneStatus, NOTE_CONTRADICTED, NOTE_NOT_STEADY,
};
use crate::physics::layered::{HotFaceReading, ModelCheck, MAX_LAYERS};
use crate::physics::profile::heat_loss_w;
use crate::physics::uncertainty::{
    OUT_FLUX_HOT_FACE, OUT_FLUX_SHELL, OUT_HOT_FACE, OUT_INTERFACE, OUT_RESISTANCE, OUT_SHELL,
};

/// A steady model: stateless, the wall rebuilt from the settings each cycle.
#[derive(Debug)]
pub struct Steady {
    model: Model,
}

impl Steady {
    /// `model`: `quadratic` or `layered`.
    pub fn new(model: Model) -> Self {
        Steady { model }
    }
}

impl ZoneModel for Steady {
    fn model(&self) -> Model {
        self.model
    }

    fn estimate(
        &mut self,
        input: &ModelInput<'_>,
        baseline: &mut Baseline,
        report: &mut ZoneReport,
    ) -> Result<(), ModelError> {
        let ModelInput {
            settings,
            zone,
            channels,
            samples,
            depth_sigma_m,
            max_age_s,
            now,
            ..
        } = *input;
        let wall = Wall::try_new(zone, settings)?;
        report.stored_w_m2 = stored_w_m2(&report.probes, &wall);
        let sol = wall.solve(samples)?;
        let full_order = match self.model {
            Model::Quadratic => sol.degree == Some(if zone.probes.len() >= 3 { 2 } else { 1 }),
            Model::Layered | Model::Transient => true,
        };
        // Data that contradict the model (residuals beyond what the probes'
        // uncertainties allow: the wall is not at steady state, or a probe
        // or the model is wrong) degrade the zone, with the reason.
        report.model_check = Some(sol.check.name());
        report.model_note = (sol.check == ModelCheck::Contradicted).then(|| {
            note(if changing_fast(&report.probes) {
                NOTE_NOT_STEADY
            } else {
                NOTE_CONTRADICTED
            })
        });
        report.status = if sol.check == ModelCheck::Contradicted {
            if changing_fast(&report.probes) {
                ZoneStatus::NotSteady
            } else {
                ZoneStatus::Contradicted
            }
        } else if samples.len() == zone.probes.len() && full_order {
            ZoneStatus::Ok
        } else {
            ZoneStatus::Degraded
        };
        for p in report.probes.iter_mut() {
            let x = p.depth_mm / 1000.0;
            p.fitted_c = wall.fitted(&sol, x).map(|(t, _)| t);
            p.rate_model_c_per_h = wall.model_rate_c_per_s(&sol, x).map(|r| r * 3600.0);
        }
        // A steady model's own heat equation fixes the rate at every probe
        // (zero for a layered or linear profile, the curvature's uniform
        // rate for a quadratic one). Measured rates that differ say the
        // wall is not in the state the model assumes, even where the fit
        // passes through every probe and so cannot be checked by them.
        let unsteady = rates_contradict_steady(&report.probes);
        if !report.status.withholds() && unsteady {
            report.status = ZoneStatus::NotSteady;
            report.model_note = Some(note(NOTE_NOT_STEADY));
        }
        let hot_reading = zone
            .hot_face_channel
            .and_then(|hf| channels.get(hf))
            .and_then(|c| c.fresh(now, max_age_s));
        report.hot_face_measured_c = hot_reading.map(|r| r.celsius);
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
            // Steady: the one flux crosses each contact, T_cold = T_hot − q R.
            if zone.layers.iter().any(|l| l.contact_m2k_w > 0.0) {
                let q = sol.flux_shell_w_m2;
                report.interface_cold_c = Some(
                    sol.interface_c
                        .iter()
                        .zip(&zone.layers)
                        .map(|(&(t, _), l)| {
                            (l.contact_m2k_w > 0.0).then_some(t - q * l.contact_m2k_w)
                        })
                        .collect(),
                );
            }
        }
        report.thermal_resistance_m2k_w = sol.resistance_m2k_w.map(|(r, _)| r);
        // Lining condition needs a reading at the hot face: steady probes
        // alone cannot tell a thinner lining from a hotter face (see
        // `LayeredWall::remaining_hot_layer`). With one, the measured
        // resistance (T_hot,measured − T_shell) / q is compared with its
        // commissioning baseline, and the hot layer is sized.
        // Each layer's relative standard uncertainty of k, for the wear σ
        // and the budget.
        let mut k_rel = [0.0; MAX_LAYERS];
        for (u, l) in k_rel.iter_mut().zip(&zone.layers) {
            *u = settings.materials[l.material].conductivity_uncertainty_pct / 100.0;
        }
        let conductivity_rel = &k_rel[..zone.layers.len().min(MAX_LAYERS)];
        let mut lining_sigma_mm = None;
        if let (Wall::Layered(l), Some(reading)) = (&wall, hot_reading) {
            if sol.flux_shell_w_m2.abs() > 1.0 {
                let r = (reading.celsius - sol.shell_c) / sol.flux_shell_w_m2;
                if sol.check == ModelCheck::Consistent && !unsteady {
                    baseline.record(now, zone.baseline_days, reading.celsius, r);
                }
                report.resistance_change_pct =
                    baseline.change_pct(now, zone.baseline_days, reading.celsius, r);
            }
            let hot = HotFaceReading {
                temp_c: reading.celsius,
                sigma_c: reading.sigma_c,
            };
            if let Ok(w) = l.remaining_hot_layer(samples, hot) {
                report.lining_remaining_mm = Some(w.remaining_mm);
                // The readings' σ of the estimate, with the probes'
                // depths and the layers' conductivities added.
                let extra = wear_sigma_mm(l, samples, hot, depth_sigma_m, conductivity_rel);
                lining_sigma_mm = Some(match extra {
                    Some((d, k)) => (w.sigma_mm.powi(2) + d * d + k * k).sqrt(),
                    None => w.sigma_mm,
                });
            }
        }
        let surface = shell_surface(zone, sol.shell_c);
        report.flux_surface_w_m2 = Some(surface.flux_w_m2);
        report.h_convection_w_m2k = Some(surface.h_convection_w_m2k);
        report.h_radiation_w_m2k = Some(surface.h_radiation_w_m2k);
        report.balance_mismatch_pct = mismatch_pct(sol.flux_shell_w_m2, surface.flux_w_m2);
        // The complete budget: readings, depths and conductivities through
        // the same fit. Should a perturbed fit fail (a wall at the edge of
        // what the model can fit), the probes-only σ of the fit is kept.
        let budget = wall.budget(&sol, samples, depth_sigma_m, conductivity_rel);
        let mut u = Uncertainty {
            hot_face_c: sol.sigma_hot_face_c,
            shell_c: sol.sigma_shell_c,
            flux_hot_face_w_m2: sol.sigma_flux_hot_face_w_m2,
            flux_shell_w_m2: sol.sigma_flux_shell_w_m2,
            heat_loss_w: sol.sigma_flux_shell_w_m2 * zone.area_m2,
            interface_c: (!sol.interface_c.is_empty())
                .then(|| sol.interface_c.iter().map(|&(_, s)| s).collect()),
            thermal_resistance_m2k_w: sol.resistance_m2k_w.map(|(_, s)| s),
            lining_remaining_mm: lining_sigma_mm,
            budget: None,
            readings_only: [
                sol.sigma_hot_face_c,
                sol.sigma_shell_c,
                sol.sigma_flux_shell_w_m2,
            ],
        };
        if let Some(b) = &budget {
            u.hot_face_c = b.total(OUT_HOT_FACE);
            u.shell_c = b.total(OUT_SHELL);
            u.flux_hot_face_w_m2 = b.total(OUT_FLUX_HOT_FACE);
            u.flux_shell_w_m2 = b.total(OUT_FLUX_SHELL);
            u.heat_loss_w = b.total(OUT_FLUX_SHELL) * zone.area_m2;
            if let Some(r) = u.thermal_resistance_m2k_w.as_mut() {
                *r = b.total(OUT_RESISTANCE);
            }
            if let Some(ifs) = u.interface_c.as_mut() {
                for (i, s) in ifs.iter_mut().enumerate() {
                    *s = b.total(OUT_INTERFACE + i);
                }
            }
            u.budget = Some(UncertaintyBudget::of(b, false));
        }
        report.uncertainty = Some(u);
        Ok(())
    }
}

/// ∫₀ᴸ ρ c_p ∂T/∂t dx from the valid probes' measured rates (trapezoid in
/// depth order; the shallowest and deepest values held to the faces).
/// Needs two probes with rates.
fn stored_w_m2(probes: &HVec<ProbeReport, MAX_PROBES>, wall: &Wall<'_>) -> Option<f64> {
    let thickness_m = wall.thickness_m();
    let mut pts: HVec<(f64, f64), MAX_PROBES> = probes
        .iter()
        .filter(|p| p.status == Health::Ok)
        .filter_map(|p| {
            let x = p.depth_mm / 1000.0;
            let (rate, t, m) = (
                p.rate_measured_c_per_h?,
                p.measured_c?,
                wall.material_at(x)?,
            );
            Some((x, m.heat_capacity_j_m3k(t) * rate / 3600.0))
        })
        .collect();
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
/// "not at steady state", and a measured rate this far from a steady
/// model's own rate at that probe makes it `not_steady` (a threshold of
/// ours), °C/h.
pub const FAST_RATE_C_PER_H: f64 = 5.0;

/// Do the valid probes' measured rates say the wall is not in the state a
/// steady model assumes? A probe disagrees when its measured rate differs
/// from the model's rate there (None: zero) by more than
/// [`FAST_RATE_C_PER_H`]. Heat from either face reaches the probe nearest
/// that face first, so a disagreement there, or at two probes, is the
/// wall; one interior probe alone, between neighbours that agree, is that
/// probe (a jump its own rate window still holds: the diagnostics judge it).
fn rates_contradict_steady(probes: &HVec<ProbeReport, MAX_PROBES>) -> bool {
    let mut by_depth: HVec<(f64, bool), MAX_PROBES> = probes
        .iter()
        .filter(|p| p.status == Health::Ok)
        .filter_map(|p| {
            let measured = p.rate_measured_c_per_h?;
            let off = (measured - p.rate_model_c_per_h.unwrap_or(0.0)).abs() > FAST_RATE_C_PER_H;
            Some((p.depth_mm, off))
        })
        .collect();
    by_depth.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    let off = by_depth.iter().filter(|p| p.1).count();
    let at_a_face = by_depth.first().is_some_and(|p| p.1) || by_depth.last().is_some_and(|p| p.1);
    off >= 2 || at_a_face
}

/// Relative mismatch of two flux estimates, %; None when the reference is
/// too small for a percentage to mean anything (|q| < 1 W/m²).
pub(super) fn mismatch_pct(fourier_w_m2: f64, surface_w_m2: f64) -> Option<f64> {
    if surface_w_m2.abs() < 1.0 || !fourier_w_m2.is_finite() {
        return None;
    }
    Some((fourier_w_m2 - surface_w_m2) / surface_w_m2 * 100.0)
}
