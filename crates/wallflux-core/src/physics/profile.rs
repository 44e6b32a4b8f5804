//! The `quadratic` zone model: one homogeneous layer, a weighted
//! least-squares polynomial through the probe readings, Fourier's law at both
//! faces, the steady-state energy balance and the heat-equation rate.
//!
//! Pure values, no IO, no allocation.
//!
//! # Model
//!
//! `x` runs from the hot face (`x = 0`) to the shell (`x = L`), in metres.
//! The readings are turned into the Kirchhoff potential
//! `Θ(T) = ∫_{0 °C}^{T} k dT` and fitted with `Θ(x) ≈ c0 + c1 x + c2 x²`
//! (weights `1/σ_Θ²`, `σ_Θ = k σ_T`; [`crate::physics::fit`]); the face
//! temperatures are the fit extrapolated to `x = 0` and `x = L` and turned
//! back into °C. Heat flux is Fourier's law, `q(x) = −k dT/dx = −dΘ/dx`,
//! positive toward the shell. The steady-state
//! energy balance of the slab, `dq/dx = q‴`, averaged over the wall gives the
//! equivalent volumetric source `q‴ = (q(L) − q(0)) / L` (negative: a sink,
//! e.g. moisture being driven off, or heat still being stored during a
//! heat-up). Incropera et al., *Fundamentals of Heat and Mass Transfer*,
//! ch. 3 (plane wall, with and without generation).
//!
//! # Temperature-dependent conductivity
//!
//! With `k = k(T)` the steady profile is not a polynomial in `T`: it bends
//! (for `k` rising with `T`, flatter at the hot face). The Kirchhoff
//! potential straightens it: `d/dx(k dT/dx) = Θ''`, so a homogeneous slab
//! with a uniform source has `Θ'' = −q‴` and Θ is exactly a quadratic in
//! `x` (a line without source), whatever `k(T)` (Incropera §3.2, variable
//! conductivity). Fitting Θ makes the model exact for that whole family,
//! where fitting `T` and taking `k` at each face read about 3 % low for
//! `k = 0.9 (1 + 5e-4 T)` from 1200 to 300 °C (see the tests).
//!
//! With only two distinct depths the fit is a straight line: one flux
//! through the wall and no source (exact for a steady slab without source
//! over the probed span).
//!
//! # Uncertainties
//!
//! Standard uncertainties come from the fit covariance with the probes'
//! a-priori σ (not rescaled by χ²), by first-order propagation: the
//! readings' part only. The zone adds the conductivity's and the probe
//! depths' parts (usually the larger; `physics::uncertainty` and
//! `monitor::wall::Wall::budget`).

use crate::physics::fit::{fit_points, FitError, PolyFit};
use crate::physics::kirchhoff::Conductivity;
use crate::physics::material::{Material, Property};
use crate::physics::surface::ZERO_CELSIUS_K;
use crate::physics::transient::MAX_TEMPERATURE_C;

/// Reference temperature of the Kirchhoff potential Θ, °C.
pub const THETA_REF_C: f64 = 0.0;

/// Depths closer than this count as one depth when choosing the degree, m.
pub const DEPTH_TOLERANCE_M: f64 = 1e-6;

/// One probe reading: where it sits and what it reads.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeSample {
    /// Depth below the hot face, m.
    pub depth_m: f64,
    /// Reading, °C.
    pub temp_c: f64,
    /// Standard uncertainty of the reading, °C (finite, > 0).
    pub sigma_c: f64,
}

/// A single homogeneous layer evaluated with the `quadratic` model.
#[derive(Debug, Clone, Copy)]
pub struct QuadraticWall<'a> {
    /// Wall thickness L from hot face to shell, m.
    pub thickness_m: f64,
    /// The layer's material.
    pub material: &'a Material,
}

/// The result of one zone cycle of the `quadratic` model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WallSolution {
    /// Degree of the fitted profile: 2 with three or more distinct depths,
    /// 1 with two.
    pub degree: usize,
    /// Fitted temperature at the hot face, `T(0)`, °C.
    pub hot_face_c: f64,
    /// Fitted temperature at the shell, `T(L)`, °C.
    pub shell_c: f64,
    /// Heat flux entering the wall at the hot face, `q(0)`, W/m².
    pub flux_hot_face_w_m2: f64,
    /// Heat flux leaving through the shell, `q(L)`, W/m².
    pub flux_shell_w_m2: f64,
    /// Steady-state equivalent volumetric source `(q(L) − q(0)) / L`, W/m³;
    /// exactly 0 (assumed, not estimated) at degree 1.
    pub source_w_m3: f64,
    /// Unweighted RMS residual of the fit, °C.
    pub fit_rms_c: f64,
    /// The fitted Kirchhoff potential `Θ(x) = ∫_{0 °C}^{T(x)} k dT`, W/m,
    /// `x` in metres from the hot face ([`QuadraticWall::fitted_c`] turns
    /// it back into °C).
    pub fit: PolyFit,
    /// Standard uncertainty of `hot_face_c`, °C.
    pub sigma_hot_face_c: f64,
    /// Standard uncertainty of `shell_c`, °C.
    pub sigma_shell_c: f64,
    /// Standard uncertainty of `flux_hot_face_w_m2` from the probes only
    /// (not from k), W/m².
    pub sigma_flux_hot_face_w_m2: f64,
    /// Standard uncertainty of `flux_shell_w_m2` from the probes only, W/m².
    pub sigma_flux_shell_w_m2: f64,
    /// Standard uncertainty of `source_w_m3` from the probes only, W/m³
    /// (0 at degree 1, where the source is not estimated).
    pub sigma_source_w_m3: f64,
}

impl WallSolution {
    /// Heat leaving the zone through the shell, W (see [`heat_loss_w`]).
    pub fn heat_loss_w(&self, area_m2: f64) -> f64 {
        heat_loss_w(self.flux_shell_w_m2, area_m2)
    }
}

/// Heat leaving a zone through its shell, `Q = q(L) · A`, W (positive =
/// loss to the surroundings). The one place a zone's loss is computed, for
/// every model.
pub fn heat_loss_w(flux_shell_w_m2: f64, area_m2: f64) -> f64 {
    flux_shell_w_m2 * area_m2
}

impl QuadraticWall<'_> {
    /// Fit the probe readings and evaluate fluxes, balance and uncertainties.
    ///
    /// Degree 2 with three or more distinct depths (closer than
    /// [`DEPTH_TOLERANCE_M`] counts as one), 1 with two; should the
    /// quadratic be singular in its weights (the third depth's σ so large it
    /// carries no information) the line is used. Faces: `T(0)`, `T(L)` from
    /// the fit; fluxes `q(0) = −k(T(0)) T'(0)`, `q(L) = −k(T(L)) T'(L)` at
    /// degree 2, one Kirchhoff flux at degree 1 (module docs).
    ///
    /// Errors: [`FitError::BadThickness`]; [`FitError::NonFinite`] for a NaN
    /// or infinite depth or reading; [`FitError::DepthOutsideWall`] for a
    /// depth outside `[0, L]` (beyond [`DEPTH_TOLERANCE_M`]);
    /// [`FitError::BadWeight`] for a bad σ; [`FitError::TooFewPoints`] below
    /// two samples; [`FitError::TooFewDepths`] when all sit at one depth.
    pub fn solve(&self, samples: &[ProbeSample]) -> Result<WallSolution, FitError> {
        let l = self.thickness_m;
        if !(l.is_finite() && l > 0.0) {
            return Err(FitError::BadThickness { thickness_m: l });
        }
        let mut shallowest_m = f64::INFINITY;
        let mut deepest_m = f64::NEG_INFINITY;
        for s in samples {
            if !s.depth_m.is_finite() || !s.temp_c.is_finite() {
                return Err(FitError::NonFinite);
            }
            if s.depth_m < -DEPTH_TOLERANCE_M || s.depth_m > l + DEPTH_TOLERANCE_M {
                return Err(FitError::DepthOutsideWall {
                    depth_m: s.depth_m,
                    thickness_m: l,
                });
            }
            shallowest_m = shallowest_m.min(s.depth_m);
            deepest_m = deepest_m.max(s.depth_m);
        }
        if samples.len() < 2 {
            return Err(FitError::TooFewPoints {
                have: samples.len(),
                need: 2,
            });
        }
        let distinct = distinct_depths_up_to_3(samples);
        if distinct < 2 {
            return Err(FitError::TooFewDepths {
                have: distinct,
                need: 2,
            });
        }

        // Fit in the Kirchhoff potential Θ(T) = ∫_{0 °C}^{T} k dT: for a
        // homogeneous slab with k(T) and a uniform source, k T' = Θ', so
        // Θ'' = −q‴ and Θ is exactly a quadratic in x (a line without a
        // source). σ_Θ = k(T) σ_T to first order.
        let k = &self.material.conductivity_w_mk;
        let theta = |t: f64| k.integral(THETA_REF_C, t);
        let points = samples
            .iter()
            .map(|s| (s.depth_m, theta(s.temp_c), k.at(s.temp_c) * s.sigma_c));
        let fit = if distinct >= 3 {
            match fit_points(points.clone(), 2) {
                Err(FitError::Singular) => fit_points(points, 1)?,
                other => other?,
            }
        } else {
            fit_points(points, 1)?
        };

        let to_t = |th: f64| temperature_of(k, th).ok_or(FitError::NonFinite);
        let hot_face_c = to_t(fit.value(0.0))?;
        let shell_c = to_t(fit.value(l))?;
        // Fourier's law, q = −k dT/dx = −dΘ/dx: the slope of the fit is the
        // flux itself, with no conductivity to pick at the faces.
        let q0 = -fit.slope(0.0);
        let ql = -fit.slope(l);
        let sd_q0 = fit.slope_variance(0.0).max(0.0).sqrt();
        let sd_ql = fit.slope_variance(l).max(0.0).sqrt();
        let (source, sd_source) = if fit.degree >= 2 {
            // Var(q(L) − q(0)): the two slopes share coefficients.
            let var_diff = fit.slope_variance(l) + fit.slope_variance(0.0)
                - 2.0 * fit.slope_covariance(0.0, l);
            ((ql - q0) / l, var_diff.max(0.0).sqrt() / l)
        } else {
            (0.0, 0.0)
        };
        let mut sq = 0.0;
        for s in samples {
            let r = s.temp_c - to_t(fit.value(s.depth_m))?;
            sq += r * r;
        }
        let fit_rms_c = (sq / samples.len() as f64).sqrt();

        let solution = WallSolution {
            degree: fit.degree,
            hot_face_c,
            shell_c,
            flux_hot_face_w_m2: q0,
            flux_shell_w_m2: ql,
            source_w_m3: source,
            fit_rms_c,
            fit,
            sigma_hot_face_c: fit.value_variance(0.0).max(0.0).sqrt() / k.at(hot_face_c),
            sigma_shell_c: fit.value_variance(l).max(0.0).sqrt() / k.at(shell_c),
            sigma_flux_hot_face_w_m2: sd_q0,
            sigma_flux_shell_w_m2: sd_ql,
            sigma_source_w_m3: sd_source,
        };
        let finite = [
            solution.hot_face_c,
            solution.shell_c,
            solution.flux_hot_face_w_m2,
            solution.flux_shell_w_m2,
            solution.source_w_m3,
            solution.sigma_hot_face_c,
            solution.sigma_shell_c,
            solution.sigma_flux_hot_face_w_m2,
            solution.sigma_flux_shell_w_m2,
            solution.sigma_source_w_m3,
        ]
        .iter()
        .all(|v| v.is_finite());
        if finite {
            Ok(solution)
        } else {
            Err(FitError::NonFinite)
        }
    }

    /// The heat-equation rate at `depth_m`, °C/s: from
    /// `ρ c_p ∂T/∂t = ∂/∂x (k ∂T/∂x)` (1-D conduction without source,
    /// Incropera ch. 2, the heat diffusion equation) and `k ∂T/∂x = ∂Θ/∂x`,
    ///
    /// `∂T/∂t = Θ'' / (ρ c_p)`,
    ///
    /// with `ρ c_p` at the local fitted temperature. On a steady wall with
    /// `k(T)` the temperature profile bends while Θ stays straight, so the
    /// rate is zero, as it must be; `α T''` would report a false cooling.
    /// Its value is the same everywhere (Θ is a quadratic): the wall's
    /// equivalent source read as a heating rate, `−source_w_m3 / (ρ c_p)`.
    ///
    /// `None` at degree 1 (a straight line carries no curvature, so the model
    /// cannot tell a transient) or if the result is not finite (e.g. a
    /// material with zero density).
    pub fn model_rate_c_per_s(&self, sol: &WallSolution, depth_m: f64) -> Option<f64> {
        if sol.fit.degree < 2 {
            return None;
        }
        let t_c = self.fitted_c(sol, depth_m)?;
        let rate = sol.fit.curvature() / self.material.heat_capacity_j_m3k(t_c);
        rate.is_finite().then_some(rate)
    }

    /// Fitted temperature at `depth_m` below the hot face, °C (the fitted
    /// potential turned back into a temperature); None if out of reach.
    pub fn fitted_c(&self, sol: &WallSolution, depth_m: f64) -> Option<f64> {
        temperature_of(&self.material.conductivity_w_mk, sol.fit.value(depth_m))
    }

    /// Standard uncertainty of [`Self::fitted_c`], °C: σ_Θ / k(T).
    pub fn fitted_sigma_c(&self, sol: &WallSolution, depth_m: f64) -> Option<f64> {
        let t = self.fitted_c(sol, depth_m)?;
        Some(
            sol.fit.value_variance(depth_m).max(0.0).sqrt() / self.material.conductivity_w_mk.at(t),
        )
    }
}

/// Number of distinct depths (within [`DEPTH_TOLERANCE_M`]), counted up to 3:
/// all the degree choice needs, in at most 3 comparisons per sample.
/// The temperature whose potential `∫_{THETA_REF_C}^{T} k dT` is `theta`
/// (the inverse Kirchhoff transform of [`crate::physics::kirchhoff`]); `None`
/// for an invalid conductivity, a potential that is not finite, or a
/// temperature outside −273.15 °C … [`MAX_TEMPERATURE_C`].
fn temperature_of(k: &Property, theta: f64) -> Option<f64> {
    let t = Conductivity::new(k)
        .ok()?
        .inverse(THETA_REF_C, theta)
        .ok()?;
    (-ZERO_CELSIUS_K..=MAX_TEMPERATURE_C)
        .contains(&t)
        .then_some(t)
}

fn distinct_depths_up_to_3(samples: &[ProbeSample]) -> usize {
    let mut seen = [0.0_f64; 3];
    let mut count = 0;
    for s in samples {
        let known = seen
            .iter()
            .take(count)
            .any(|&d| (d - s.depth_m).abs() <= DEPTH_TOLERANCE_M);
        if !known {
            if let Some(slot) = seen.get_mut(count) {
                *slot = s.depth_m;
                count += 1;
            }
            if count == seen.len() {
                break;
            }
        }
    }
    count
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::fit::test_rng::{mean_std, SplitMix64};
    use crate::physics::material::Property;

    fn close(got: f64, want: f64, rel: f64) -> bool {
        (got - want).abs() <= rel * want.abs()
    }

    fn samples_of(depths: &[f64], profile: impl Fn(f64) -> f64, sigma_c: f64) -> Vec<ProbeSample> {
        depths
            .iter()
            .map(|&d| ProbeSample {
                depth_m: d,
                temp_c: profile(d),
                sigma_c,
            })
            .collect()
    }

    /// Dense fireclay-like values (VDI Heat Atlas range in docs/references.md).
    fn fireclay() -> Material {
        Material::constant(1.3, 2150.0, 1000.0)
    }

    /// k = 0.9 (1 + 5e-4 T) W/mK as a two-point table: the table is linear
    /// between its points, so this is the linear law exactly on 0…1600 °C.
    fn linear_k_material() -> Material {
        let k = |t: f64| 0.9 * (1.0 + 5e-4 * t);
        Material {
            conductivity_w_mk: Property::table("k", &[(0.0, k(0.0)), (1600.0, k(1600.0))]).unwrap(),
            density_kg_m3: 2150.0,
            specific_heat_j_kgk: Property::Constant(1000.0),
            max_service_c: None,
        }
    }

    /// Steady slab, constant k, no source: T is linear and q = k ΔT / L
    /// (Fourier's law, Incropera ch. 3, plane wall). 1200 → 300 °C over
    /// 0.23 m at k = 1.3: q = 1.3 × 900 / 0.23 = 5086.956… W/m².
    #[test]
    fn linear_profile_gives_fourier_flux() {
        let (l, t0, tl) = (0.23, 1200.0, 300.0);
        let profile = |x: f64| t0 + (tl - t0) * x / l;
        let q = 1.3 * (t0 - tl) / l;
        let material = fireclay();
        let wall = QuadraticWall {
            thickness_m: l,
            material: &material,
        };
        for depths in [&[0.03, 0.2][..], &[0.0, 0.05, 0.1, 0.17, 0.23][..]] {
            let sol = wall.solve(&samples_of(depths, profile, 1.5)).unwrap();
            assert_eq!(sol.degree, if depths.len() == 2 { 1 } else { 2 });
            assert!(
                close(sol.flux_hot_face_w_m2, q, 1e-9),
                "{depths:?} {}",
                sol.flux_hot_face_w_m2
            );
            assert!(
                close(sol.flux_shell_w_m2, q, 1e-9),
                "{depths:?} {}",
                sol.flux_shell_w_m2
            );
            assert!(close(sol.hot_face_c, t0, 1e-12) && close(sol.shell_c, tl, 1e-12));
            // No source: zero to rounding, compared with the flux scale q/L.
            assert!(
                sol.source_w_m3.abs() < 1e-9 * q / l,
                "source {}",
                sol.source_w_m3
            );
            assert!(sol.fit_rms_c < 1e-9);
            assert!(close(wall.fitted_c(&sol, 0.115).unwrap(), 750.0, 1e-12));
        }
    }

    /// Slab of thickness W, uniform source q‴, both faces at Ts, constant k.
    /// Integrating k T'' = −q‴ twice with T(0) = T(W) = Ts gives
    /// T = Ts + q‴ x (W − x) / (2k); then q = −k T' = −q‴ (W/2 − x), so
    /// q(0) = −q‴W/2 (heat leaves through the hot face too), q(W) = +q‴W/2,
    /// and (q(W) − q(0))/W = q‴. The centre is Tmax = Ts + q‴W²/(8k), which is
    /// Incropera's Tmax = Ts + q‴L²/(2k) with half-thickness L = W/2 (§3.5,
    /// plane wall with generation; docs/references.md). A sink (q‴ < 0) likewise.
    #[test]
    fn uniform_source_is_recovered() {
        let (w, ts, k) = (0.3, 80.0, 1.2);
        let material = Material::constant(k, 2000.0, 900.0);
        let wall = QuadraticWall {
            thickness_m: w,
            material: &material,
        };
        for q3 in [2.0e4, -5.0e3] {
            let profile = |x: f64| ts + q3 * x * (w - x) / (2.0 * k);
            let sol = wall
                .solve(&samples_of(&[0.02, 0.1, 0.17, 0.25, 0.3], profile, 2.0))
                .unwrap();
            assert_eq!(sol.degree, 2);
            assert!(
                close(sol.source_w_m3, q3, 1e-9),
                "source {}",
                sol.source_w_m3
            );
            assert!(close(sol.flux_hot_face_w_m2, -q3 * w / 2.0, 1e-9));
            assert!(close(sol.flux_shell_w_m2, q3 * w / 2.0, 1e-9));
            assert!(close(sol.hot_face_c, ts, 1e-12) && close(sol.shell_c, ts, 1e-12));
            let t_max = ts + q3 * w * w / (8.0 * k);
            assert!(
                close(wall.fitted_c(&sol, w / 2.0).unwrap(), t_max, 1e-12),
                "Tmax {}",
                wall.fitted_c(&sol, w / 2.0).unwrap()
            );
        }
    }

    /// The exact steady profile for k = k0 (1 + bT), no source: the
    /// Kirchhoff potential Θ = T + bT²/2 is linear in x (Incropera §3.2,
    /// variable conductivity), so T(x) = (−1 + sqrt(1 + 2bΘ(x)))/b and
    /// q = k0 (Θ1 − Θ2)/L = k_m (T1 − T2)/L with k_m at the mean temperature.
    fn linear_k_profile(x: f64) -> f64 {
        let (b, l) = (5e-4, 0.23);
        let theta = |t: f64| t + b * t * t / 2.0;
        let th = theta(1200.0) + (theta(300.0) - theta(1200.0)) * x / l;
        (-1.0 + (1.0 + 2.0 * b * th).sqrt()) / b
    }

    /// docs/references.md: k0 0.9, b 5e-4, L 0.23 m, 1200 → 300 °C: q 4842.39
    /// W/m², midpoint 786.58 °C. The analytic profile and `mean_between`
    /// must reproduce both (q quoted to 2 decimals, hence 0.005).
    #[test]
    fn linear_k_analytic_reference_values() {
        let m = linear_k_material();
        let k_m = m.conductivity_w_mk.mean_between(300.0, 1200.0);
        assert!((k_m * 900.0 / 0.23 - 4842.39).abs() < 0.005);
        let theta = |t: f64| t + 2.5e-4 * t * t;
        assert!((0.9 * (theta(1200.0) - theta(300.0)) / 0.23 - 4842.39).abs() < 0.005);
        // The closed form gives 786.57496 °C; docs/references.md's 786.58 is that
        // value rounded twice (786.575 → 786.58), so the band is 0.01 here.
        assert!((linear_k_profile(0.115) - 786.58).abs() < 0.01);
        assert!((linear_k_profile(0.115) - 786.5749586185547).abs() < 1e-9); // numpy 2.4.6, same formula
        assert!((linear_k_profile(0.0) - 1200.0).abs() < 1e-9);
        assert!((linear_k_profile(0.23) - 300.0).abs() < 1e-9);
    }

    /// The quadratic model on the exact k(T) profile (five equally spaced
    /// probes, faces included): fitting the Kirchhoff potential, which is a
    /// straight line for this steady slab, recovers the closed form exactly
    /// (q = 4842.39 W/m², faces 1200 and 300 °C, no source). For contrast, a
    /// quadratic fitted to T itself with −k(T)T' at each face (the naive
    /// reading) is 2.88 % low at the hot face: numpy 2.4.6 (`numpy.polyfit`
    /// on the same samples) gives q(0) = 4703.0876 W/m², reproduced here.
    #[test]
    fn linear_k_quadratic_model_is_exact() {
        let material = linear_k_material();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let depths = [0.0, 0.0575, 0.115, 0.1725, 0.23];
        let samples = samples_of(&depths, linear_k_profile, 1.0);
        let sol = wall.solve(&samples).unwrap();
        let q = 4842.391304347826; // k0 (Θ1 − Θ2) / L, as above
        assert!(
            close(sol.flux_hot_face_w_m2, q, 1e-9),
            "{}",
            sol.flux_hot_face_w_m2
        );
        assert!(
            close(sol.flux_shell_w_m2, q, 1e-9),
            "{}",
            sol.flux_shell_w_m2
        );
        assert!(sol.source_w_m3.abs() < 1e-6, "{}", sol.source_w_m3);
        assert!((sol.hot_face_c - 1200.0).abs() < 1e-8);
        assert!((sol.shell_c - 300.0).abs() < 1e-8);
        assert!((wall.fitted_c(&sol, 0.115).unwrap() - 786.5749586185547).abs() < 1e-8);
        assert!(sol.fit_rms_c < 1e-9);
        // The naive T-space reading, for the record.
        let naive =
            fit_points(samples.iter().map(|s| (s.depth_m, s.temp_c, s.sigma_c)), 2).unwrap();
        let q0_naive = -material.conductivity_w_mk.at(naive.value(0.0)) * naive.slope(0.0);
        assert!(close(q0_naive, 4703.087607426539, 1e-8), "{q0_naive}");
    }

    /// With two probes the line's single gradient is read with the Kirchhoff
    /// mean conductivity between the probe temperatures: exact for the steady
    /// k(T) slab over the probed span (Incropera §3.2), so q = 4842.39 W/m²
    /// from two probes anywhere on the exact profile, with no source. Taking k
    /// at each face instead would report a sink of about 6900 W/m³.
    #[test]
    fn linear_k_two_probes_use_the_kirchhoff_mean() {
        let material = linear_k_material();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let q = 4842.391304347826;
        for depths in [[0.0, 0.23], [0.04, 0.2], [0.1, 0.13]] {
            let sol = wall
                .solve(&samples_of(&depths, linear_k_profile, 1.0))
                .unwrap();
            assert_eq!(sol.degree, 1);
            assert!(
                close(sol.flux_hot_face_w_m2, q, 1e-9),
                "{depths:?} {}",
                sol.flux_hot_face_w_m2
            );
            assert_eq!(sol.flux_shell_w_m2, sol.flux_hot_face_w_m2);
            assert_eq!(sol.source_w_m3, 0.0);
            assert!(wall.model_rate_c_per_s(&sol, 0.1).is_none());
        }
    }

    /// Constant k, T = c0 + c1 x + c2 x²: ∂T/∂t = α T'' = α · 2 c2 everywhere
    /// (heat equation, constant properties). α = 1.3 / (2150 × 1000).
    #[test]
    fn model_rate_of_a_quadratic_with_constant_k() {
        let material = fireclay();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let c2 = 3000.0;
        let profile = |x: f64| 900.0 - 2500.0 * x + c2 * x * x;
        let sol = wall
            .solve(&samples_of(&[0.0, 0.06, 0.12, 0.23], profile, 1.0))
            .unwrap();
        let alpha = 1.3 / (2150.0 * 1000.0);
        for x in [0.0, 0.1, 0.23] {
            let rate = wall.model_rate_c_per_s(&sol, x).unwrap();
            assert!(close(rate, alpha * 2.0 * c2, 1e-9), "x {x}: {rate}");
        }
    }

    /// The steady k(T) wall has ∂T/∂t = 0 although T'' ≠ 0: the model rate
    /// (Θ''/ρc_p) is zero, while α T'' alone (k at the local temperature
    /// times the curvature of the temperature profile, here the closed
    /// form's) would report a cooling of about 0.5 °C/h at mid-wall.
    #[test]
    fn model_rate_of_a_steady_k_of_t_wall_is_zero() {
        let material = linear_k_material();
        let l = 0.23;
        let wall = QuadraticWall {
            thickness_m: l,
            material: &material,
        };
        let depths = [0.0, 0.0575, 0.115, 0.1725, 0.23];
        let sol = wall
            .solve(&samples_of(&depths, linear_k_profile, 1.0))
            .unwrap();
        let rho_c = 2150.0 * 1000.0;
        let h = 1e-3;
        let curvature = (linear_k_profile(l / 2.0 + h) - 2.0 * linear_k_profile(l / 2.0)
            + linear_k_profile(l / 2.0 - h))
            / (h * h);
        let alpha_only =
            material.conductivity_w_mk.at(linear_k_profile(l / 2.0)) * curvature / rho_c;
        assert!(
            alpha_only.abs() * 3600.0 > 0.1,
            "the naive term is not small: {alpha_only}"
        );
        for x in [0.0, l / 2.0, l] {
            let rate = wall.model_rate_c_per_s(&sol, x).unwrap();
            assert!(
                rate.abs() < 1e-9 * alpha_only.abs().max(1e-12) + 1e-15,
                "x {x}: {rate}"
            );
        }
    }

    /// Propagated σ versus Monte-Carlo scatter (constant k, so the flux is
    /// linear in the data and first-order propagation is exact): 5000 noisy
    /// data sets, 5 % band (the standard error of a sample standard deviation
    /// is 1/sqrt(2N) = 1 %).
    #[test]
    fn sigmas_match_monte_carlo() {
        let material = fireclay();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let depths = [0.0, 0.05, 0.11, 0.18, 0.23];
        let truth = |x: f64| 1150.0 - 3600.0 * x + 1500.0 * x * x;
        let mut rng = SplitMix64::new(2024);
        const N: usize = 5000;
        let mut hot = [0.0; N];
        let mut q_shell = [0.0; N];
        let mut q_hot = [0.0; N];
        let mut source = [0.0; N];
        let mut sol0 = None;
        for i in 0..N {
            let mut s = samples_of(&depths, truth, 2.5);
            for p in s.iter_mut() {
                p.temp_c += 2.5 * rng.normal();
            }
            let sol = wall.solve(&s).unwrap();
            hot[i] = sol.hot_face_c;
            q_shell[i] = sol.flux_shell_w_m2;
            q_hot[i] = sol.flux_hot_face_w_m2;
            source[i] = sol.source_w_m3;
            sol0.get_or_insert(sol);
        }
        let sol = sol0.unwrap();
        let checks = [
            (mean_std(&hot).1, sol.sigma_hot_face_c),
            (mean_std(&q_shell).1, sol.sigma_flux_shell_w_m2),
            (mean_std(&q_hot).1, sol.sigma_flux_hot_face_w_m2),
            (mean_std(&source).1, sol.sigma_source_w_m3),
        ];
        for (mc, propagated) in checks {
            assert!(
                close(mc, propagated, 0.05),
                "MC {mc} vs propagated {propagated}"
            );
        }
    }

    #[test]
    fn degree_follows_distinct_depths() {
        let material = fireclay();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let f = |x: f64| 1000.0 - 3000.0 * x;
        let degree = |d: &[f64]| wall.solve(&samples_of(d, f, 1.0)).map(|s| s.degree);
        assert_eq!(degree(&[0.0, 0.1, 0.2]), Ok(2));
        assert_eq!(degree(&[0.0, 0.2]), Ok(1));
        assert_eq!(degree(&[0.05, 0.05, 0.2, 0.2]), Ok(1));
        // Within a micrometre is the same depth.
        assert_eq!(degree(&[0.05, 0.050_000_5, 0.2]), Ok(1));
        assert_eq!(
            degree(&[0.1, 0.1, 0.1]),
            Err(FitError::TooFewDepths { have: 1, need: 2 })
        );
        // A third depth whose σ is so large it carries no information: line.
        let mut s = samples_of(&[0.0, 0.0, 0.2, 0.2, 0.1], f, 1.0);
        if let Some(p) = s.last_mut() {
            p.sigma_c = 1e12;
        }
        assert_eq!(wall.solve(&s).map(|s| s.degree), Ok(1));
    }

    #[test]
    fn bad_inputs_are_typed_errors() {
        use FitError::*;
        let material = fireclay();
        let wall = QuadraticWall {
            thickness_m: 0.23,
            material: &material,
        };
        let f = |x: f64| 1000.0 - 3000.0 * x;
        let good = samples_of(&[0.0, 0.1, 0.2], f, 1.0);
        assert_eq!(wall.solve(&[]), Err(TooFewPoints { have: 0, need: 2 }));
        assert_eq!(
            wall.solve(&good[..1]),
            Err(TooFewPoints { have: 1, need: 2 })
        );
        let with = |edit: &dyn Fn(&mut ProbeSample)| {
            let mut s = good.clone();
            if let Some(p) = s.get_mut(1) {
                edit(p);
            }
            wall.solve(&s)
        };
        assert_eq!(with(&|p| p.temp_c = f64::NAN), Err(NonFinite));
        assert_eq!(with(&|p| p.depth_m = f64::NAN), Err(NonFinite));
        assert_eq!(with(&|p| p.sigma_c = 0.0), Err(BadWeight));
        assert_eq!(with(&|p| p.sigma_c = -1.0), Err(BadWeight));
        assert_eq!(with(&|p| p.sigma_c = f64::NAN), Err(BadWeight));
        assert_eq!(
            with(&|p| p.depth_m = 0.3),
            Err(DepthOutsideWall {
                depth_m: 0.3,
                thickness_m: 0.23
            })
        );
        assert_eq!(
            with(&|p| p.depth_m = -0.01),
            Err(DepthOutsideWall {
                depth_m: -0.01,
                thickness_m: 0.23
            })
        );
        for l in [0.0, -0.2, f64::NAN] {
            let w = QuadraticWall {
                thickness_m: l,
                material: &material,
            };
            assert!(matches!(w.solve(&good), Err(BadThickness { .. })));
        }
        // A material with zero density has no finite rate; no panic.
        let broken = Material::constant(1.0, 0.0, 1000.0);
        let w = QuadraticWall {
            thickness_m: 0.23,
            material: &broken,
        };
        let sol = w
            .solve(&samples_of(
                &[0.0, 0.1, 0.2],
                |x| 900.0 - 100.0 * x + 50.0 * x * x,
                1.0,
            ))
            .unwrap();
        assert_eq!(w.model_rate_c_per_s(&sol, 0.1), None);
    }

    /// Arbitrary inputs never panic, and an Ok solution is finite throughout.
    #[test]
    fn garbage_never_panics() {
        let material = linear_k_material();
        let wall = QuadraticWall {
            thickness_m: 0.4,
            material: &material,
        };
        let mut rng = SplitMix64::new(31337);
        let specials = [
            0.0,
            -0.0,
            1e-300,
            1e300,
            -1e300,
            f64::NAN,
            f64::INFINITY,
            0.4,
            5e-324,
        ];
        let mut pick = |scale: f64| {
            if rng.uniform() < 0.15 {
                specials[(rng.next_u64() % specials.len() as u64) as usize]
            } else {
                scale * rng.uniform()
            }
        };
        for _ in 0..20_000 {
            let n = 6;
            let s: heapless::Vec<ProbeSample, 6> = (0..n)
                .map(|_| ProbeSample {
                    depth_m: pick(0.4),
                    temp_c: pick(3000.0) - 1000.0,
                    sigma_c: pick(5.0),
                })
                .collect();
            let take = (pick(7.0) as usize).min(n);
            if let Ok(sol) = wall.solve(&s[..take]) {
                assert!(sol.flux_shell_w_m2.is_finite() && sol.sigma_source_w_m3.is_finite());
                let _ = wall.model_rate_c_per_s(&sol, 0.2);
            }
        }
    }

    /// Q = q(L) · A: the three-layer check wall of docs/references.md loses
    /// 1265.1 W/m²; over 12 m² that is 15 181.2 W.
    #[test]
    fn heat_loss_is_shell_flux_times_area() {
        assert!((heat_loss_w(1265.1, 12.0) - 15_181.2).abs() < 1e-9);
    }
}
