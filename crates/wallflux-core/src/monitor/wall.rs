//! The zone's wall model behind one face: `quadratic` (one layer, weighted
//! polynomial) or `layered` (steady, any layers, k(T) exact). The zone
//! cycle, its outlier test and its report do not care which.

use heapless::Vec as HVec;

use crate::config::{Model, Settings, Zone};
use crate::physics::fit::FitError;
use crate::physics::layered::{
    self, LayerSpec, LayeredError, LayeredSolution, LayeredWall, ModelCheck, MAX_LAYERS, MAX_PROBES,
};
use crate::physics::material::Material;
use crate::physics::profile::{ProbeSample, QuadraticWall, WallSolution};
use crate::physics::uncertainty::{
    self as unc, Budget, Outputs, SteadyInputs, MAX_OUTPUTS, OUT_FLUX_HOT_FACE, OUT_FLUX_SHELL,
    OUT_HOT_FACE, OUT_INTERFACE, OUT_RESISTANCE, OUT_SHELL,
};

pub enum Wall<'a> {
    Quadratic(QuadraticWall<'a>),
    Layered(LayeredWall<'a>),
}

/// What a fit gives, whichever the model.
#[derive(Debug, Clone)]
pub struct Fit {
    pub hot_face_c: f64,
    pub shell_c: f64,
    pub flux_hot_face_w_m2: f64,
    pub flux_shell_w_m2: f64,
    /// Steady-state equivalent source (the layered model assumes none).
    pub source_w_m3: Option<f64>,
    pub fit_rms_c: f64,
    pub degree: Option<u8>,
    pub sigma_hot_face_c: f64,
    pub sigma_shell_c: f64,
    pub sigma_flux_hot_face_w_m2: f64,
    pub sigma_flux_shell_w_m2: f64,
    /// Interfaces hot to cold with their σ (layered).
    pub interface_c: HVec<(f64, f64), MAX_LAYERS>,
    /// Thermal resistance hot face → shell and its σ (layered), m²K/W.
    pub resistance_m2k_w: Option<(f64, f64)>,
    pub check: ModelCheck,
    pub chi2: f64,
    pub dof: usize,
    solution: Solution,
}

#[derive(Debug, Clone)]
enum Solution {
    Quadratic(WallSolution),
    Layered(LayeredSolution),
}

/// Why a zone has no steady wall, or its fit failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum WallError {
    /// The zone's model is not a steady one.
    #[error("the {0} model has no steady wall")]
    NotSteady(Model),
    /// A layer names no known material (validation refuses such a config).
    #[error("a layer's material is not known")]
    NoMaterial,
    #[error(transparent)]
    Layered(#[from] LayeredError),
    #[error(transparent)]
    Fit(#[from] FitError),
}

impl<'a> Wall<'a> {
    /// The zone's steady wall (`quadratic` or `layered`), if it has one.
    pub fn new(zone: &Zone, settings: &'a Settings) -> Option<Wall<'a>> {
        Self::try_new(zone, settings).ok()
    }

    /// The zone's steady wall, or why it has none.
    pub fn try_new(zone: &Zone, settings: &'a Settings) -> Result<Wall<'a>, WallError> {
        let material = |i: usize| {
            settings
                .materials
                .get(i)
                .map(|m| &m.material)
                .ok_or(WallError::NoMaterial)
        };
        match zone.model {
            Model::Quadratic => {
                let layer = zone.layers.first().ok_or(WallError::NoMaterial)?;
                Ok(Wall::Quadratic(QuadraticWall {
                    thickness_m: zone.thickness_m(),
                    material: material(layer.material)?,
                }))
            }
            Model::Layered => {
                // As many as the zone's layers, whose capacity is MAX_LAYERS.
                let specs: HVec<LayerSpec<'a>, MAX_LAYERS> = zone
                    .layers
                    .iter()
                    .map(|l| {
                        Ok(LayerSpec {
                            material: material(l.material)?,
                            thickness_m: l.thickness_m,
                            contact_m2k_w: l.contact_m2k_w,
                        })
                    })
                    .collect::<Result<_, WallError>>()?;
                Ok(Wall::Layered(LayeredWall::new(&specs)?))
            }
            // Stateful: `monitor::model::transient` runs it.
            Model::Transient => Err(WallError::NotSteady(zone.model)),
        }
    }

    pub fn thickness_m(&self) -> f64 {
        match self {
            Wall::Quadratic(q) => q.thickness_m,
            Wall::Layered(l) => l.thickness_m(),
        }
    }

    /// The material at `depth_m` (for heat capacity).
    pub fn material_at(&self, depth_m: f64) -> Option<&'a Material> {
        match self {
            Wall::Quadratic(q) => Some(q.material),
            Wall::Layered(l) => {
                let mut x = 0.0;
                for s in &l.layers {
                    x += s.thickness_m;
                    if depth_m <= x + 1e-9 {
                        return Some(s.material);
                    }
                }
                l.layers.last().map(|s| s.material)
            }
        }
    }

    /// The fit to `samples`, or the model's reason for none.
    pub fn solve(&self, samples: &[ProbeSample]) -> Result<Fit, WallError> {
        match self {
            Wall::Quadratic(q) => {
                let s = q.solve(samples)?;
                let dof = s.fit.dof;
                Ok(Fit {
                    hot_face_c: s.hot_face_c,
                    shell_c: s.shell_c,
                    flux_hot_face_w_m2: s.flux_hot_face_w_m2,
                    flux_shell_w_m2: s.flux_shell_w_m2,
                    source_w_m3: Some(s.source_w_m3),
                    fit_rms_c: s.fit_rms_c,
                    degree: Some(s.degree as u8),
                    sigma_hot_face_c: s.sigma_hot_face_c,
                    sigma_shell_c: s.sigma_shell_c,
                    sigma_flux_hot_face_w_m2: s.sigma_flux_hot_face_w_m2,
                    sigma_flux_shell_w_m2: s.sigma_flux_shell_w_m2,
                    interface_c: HVec::new(),
                    resistance_m2k_w: None,
                    check: layered::model_check(s.fit.chi2, dof),
                    chi2: s.fit.chi2,
                    dof,
                    solution: Solution::Quadratic(s),
                })
            }
            Wall::Layered(l) => {
                let s = l.solve(samples)?;
                // Both of capacity MAX_LAYERS, as is the pair.
                let interface_c = s
                    .interface_c
                    .iter()
                    .zip(&s.sigma_interface_c)
                    .map(|(&t, &sd)| (t, sd))
                    .collect();
                Ok(Fit {
                    hot_face_c: s.hot_face_c,
                    shell_c: s.shell_c,
                    flux_hot_face_w_m2: s.flux_w_m2,
                    flux_shell_w_m2: s.flux_w_m2,
                    source_w_m3: None,
                    fit_rms_c: s.fit_rms_c,
                    degree: None,
                    sigma_hot_face_c: s.sigma_hot_face_c,
                    sigma_shell_c: s.sigma_shell_c,
                    sigma_flux_hot_face_w_m2: s.sigma_flux_w_m2,
                    sigma_flux_shell_w_m2: s.sigma_flux_w_m2,
                    interface_c,
                    resistance_m2k_w: Some((s.thermal_resistance_m2k_w, s.sigma_resistance_m2k_w)),
                    check: s.check,
                    chi2: s.chi2,
                    dof: s.dof,
                    solution: Solution::Layered(s),
                })
            }
        }
    }

    /// The fitted temperature at `depth_m` and its standard uncertainty.
    pub fn fitted(&self, fit: &Fit, depth_m: f64) -> Option<(f64, f64)> {
        match (self, &fit.solution) {
            (Wall::Quadratic(q), Solution::Quadratic(s)) => {
                Some((q.fitted_c(s, depth_m)?, q.fitted_sigma_c(s, depth_m)?))
            }
            (Wall::Layered(l), Solution::Layered(s)) => {
                let t = l.temperature_at(s.hot_face_c, s.flux_w_m2, depth_m).ok()?;
                let sd = l.sigma_temperature_at(s, depth_m).ok()?;
                Some((t, sd))
            }
            _ => None,
        }
    }

    /// The heat-equation rate at `depth_m`, °C/s (quadratic model only: the
    /// steady layered model has none by assumption).
    pub fn model_rate_c_per_s(&self, fit: &Fit, depth_m: f64) -> Option<f64> {
        match (self, &fit.solution) {
            (Wall::Quadratic(q), Solution::Quadratic(s)) => q.model_rate_c_per_s(s, depth_m),
            _ => None,
        }
    }
}

impl Wall<'_> {
    /// The complete uncertainty budget of this wall's fit to `samples`
    /// (probe readings, `depth_sigma_m` per sample, `conductivity_rel` per
    /// layer): central differences of the same `solve` that produced the
    /// published numbers ([`unc::steady_budget`]). Outputs by the
    /// `physics::uncertainty::OUT_*` indices: quadratic 4 (no resistance),
    /// layered 5 plus its interfaces.
    pub fn budget(
        &self,
        fit: &Fit,
        samples: &HVec<ProbeSample, MAX_PROBES>,
        depth_sigma_m: &[f64],
        conductivity_rel: &[f64],
    ) -> Option<Budget> {
        // The fitted profile's slope at each probe (quadratic: the depth
        // counts as its equivalent reading step); one per sample.
        let slopes: HVec<f64, MAX_PROBES> = match self {
            Wall::Quadratic(_) => {
                let l = self.thickness_m();
                samples
                    .iter()
                    .map(|s| {
                        let h = 1e-4;
                        let (a, b) = ((s.depth_m - h).max(0.0), (s.depth_m + h).min(l));
                        let ta = self.fitted(fit, a)?.0;
                        let tb = self.fitted(fit, b)?.0;
                        Some((tb - ta) / (b - a))
                    })
                    .collect::<Option<_>>()?
            }
            Wall::Layered(_) => HVec::new(),
        };
        let inputs = SteadyInputs {
            samples,
            depth_sigma_m,
            conductivity_rel,
            thickness_m: self.thickness_m(),
            readings: true,
            slope_c_per_m: &slopes,
            mixed_terms: false,
        };
        match self {
            Wall::Quadratic(q) => unc::steady_budget(&inputs, |s, f, out: &mut Outputs| {
                let m = Material {
                    conductivity_w_mk: q.material.conductivity_w_mk.scaled(f[0]),
                    ..q.material.clone()
                };
                let w = QuadraticWall {
                    thickness_m: q.thickness_m,
                    material: &m,
                };
                let sol = w.solve(s).ok()?;
                out[OUT_HOT_FACE] = sol.hot_face_c;
                out[OUT_SHELL] = sol.shell_c;
                out[OUT_FLUX_HOT_FACE] = sol.flux_hot_face_w_m2;
                out[OUT_FLUX_SHELL] = sol.flux_shell_w_m2;
                Some(4)
            }),
            Wall::Layered(l) => {
                // Readings and depths: first order through the fit's own
                // covariance (a reading's step moves the fit by C Jᵀ W e_i;
                // a depth's step is the reading's step of −T'(x)·δx with
                // T' = −q/k inside a layer), evaluated on the profile at
                // p ± Δp (cheap: a march, no refit). Conductivities: the
                // whole fit again with each layer's k scaled.
                let Solution::Layered(sol) = &fit.solution else {
                    return None;
                };
                let mut budget = unc::steady_budget(
                    &SteadyInputs {
                        depth_sigma_m: &[],
                        samples: &[],
                        ..inputs
                    },
                    |_, f, out: &mut Outputs| {
                        if f.iter().all(|&v| v == 1.0) {
                            // The nominal: already solved.
                            fill_layered(l, sol.hot_face_c, sol.flux_w_m2, out)
                        } else {
                            with_scaled_conductivity(l, f, |w| {
                                let s = w.solve(samples).ok()?;
                                fill_layered(w, s.hot_face_c, s.flux_w_m2, out)
                            })
                        }
                    },
                )?;
                let c = sol.covariance;
                let (mut plus, mut minus) = ([0.0; MAX_OUTPUTS], [0.0; MAX_OUTPUTS]);
                let mut tc = [0.0; MAX_OUTPUTS];
                let mut dx = [0.0; MAX_OUTPUTS];
                for (s, &sx) in samples.iter().zip(depth_sigma_m) {
                    let (_, k, g) = l.point_at(sol.hot_face_c, sol.flux_w_m2, s.depth_m).ok()?;
                    // Δp of a +1σ reading: C ĵ with ĵ = g/σ.
                    let jw = [g[0] / s.sigma_c, g[1] / s.sigma_c];
                    let dp = [
                        c[0][0] * jw[0] + c[0][1] * jw[1],
                        c[1][0] * jw[0] + c[1][1] * jw[1],
                    ];
                    // The depth's equivalent reading step, in reading σ.
                    let depth_ratio = (sol.flux_w_m2 / k).abs() * sx / s.sigma_c;
                    fill_layered(l, sol.hot_face_c + dp[0], sol.flux_w_m2 + dp[1], &mut plus)?;
                    fill_layered(l, sol.hot_face_c - dp[0], sol.flux_w_m2 - dp[1], &mut minus)?;
                    for i in 0..budget.n {
                        let d = 0.5 * (plus[i] - minus[i]);
                        tc[i] += d * d;
                        dx[i] += d * d * depth_ratio * depth_ratio;
                    }
                }
                for i in 0..budget.n {
                    budget.thermocouple[i] = tc[i].sqrt();
                    budget.depth[i] = dx[i].sqrt();
                }
                (0..budget.n)
                    .all(|i| budget.total(i).is_finite())
                    .then_some(budget)
            }
        }
    }
}

/// A layered wall's numbers for `(T_hot, q)` by the `OUT_*` indices.
fn fill_layered(l: &LayeredWall<'_>, hot_c: f64, q: f64, out: &mut Outputs) -> Option<usize> {
    let mut ifs = [0.0; MAX_LAYERS];
    let n_if = l.layers.len().saturating_sub(1);
    let (shell, r) = l.numbers_at(hot_c, q, &mut ifs[..n_if]).ok()?;
    out[OUT_HOT_FACE] = hot_c;
    out[OUT_SHELL] = shell;
    out[OUT_FLUX_HOT_FACE] = q;
    out[OUT_FLUX_SHELL] = q;
    out[OUT_RESISTANCE] = r;
    out[OUT_INTERFACE..OUT_INTERFACE + n_if].copy_from_slice(&ifs[..n_if]);
    Some(OUT_INTERFACE + n_if)
}

/// The depth and conductivity parts of the σ of a lining-wear estimate
/// (`LayeredWall::remaining_hot_layer`), mm: central differences of the
/// same estimate over each probe's depth and each layer's conductivity
/// (the readings' part is the estimate's own `sigma_mm`).
pub fn wear_sigma_mm(
    l: &LayeredWall<'_>,
    samples: &[ProbeSample],
    hot: layered::HotFaceReading,
    depth_sigma_m: &[f64],
    conductivity_rel: &[f64],
) -> Option<(f64, f64)> {
    let inputs = SteadyInputs {
        samples,
        depth_sigma_m,
        conductivity_rel,
        thickness_m: l.thickness_m(),
        readings: false,
        slope_c_per_m: &[],
        mixed_terms: true,
    };
    let b = unc::steady_budget(&inputs, |s, f, out: &mut Outputs| {
        let w = with_scaled_conductivity(l, f, |w| w.remaining_hot_layer(s, hot).ok())?;
        out[0] = w.remaining_mm;
        Some(1)
    })?;
    Some((b.depth[0], b.conductivity[0]))
}

/// `use_wall` on the layered wall `l` with layer i's conductivity scaled by
/// `factors[i]` (a perturbed wall of the uncertainty budget; no allocation:
/// the materials and layers are inline).
fn with_scaled_conductivity<R>(
    l: &LayeredWall<'_>,
    factors: &[f64],
    use_wall: impl FnOnce(&LayeredWall<'_>) -> Option<R>,
) -> Option<R> {
    let mut mats: HVec<Material, MAX_LAYERS> = HVec::new();
    for (spec, &f) in l.layers.iter().zip(factors) {
        mats.push(Material {
            conductivity_w_mk: spec.material.conductivity_w_mk.scaled(f),
            ..spec.material.clone()
        })
        .ok()?;
    }
    let mut specs: HVec<LayerSpec<'_>, MAX_LAYERS> = HVec::new();
    for (spec, m) in l.layers.iter().zip(&mats) {
        specs
            .push(LayerSpec {
                material: m,
                thickness_m: spec.thickness_m,
                contact_m2k_w: spec.contact_m2k_w,
            })
            .ok()?;
    }
    let wall = LayeredWall::new(&specs).ok()?;
    use_wall(&wall)
}
