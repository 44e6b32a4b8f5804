//! The Kirchhoff transform of a temperature-dependent conductivity and its
//! inversion: the one per-layer step of every steady march in the core.
//!
//! # The transform
//!
//! For a conductivity `k(T) > 0` the Kirchhoff potential is
//! `Θ(T) = ∫_{T_ref}^{T} k(T') dT'`. Steady conduction without a source,
//! `−k(T) dT/dx = q` with one flux `q`, becomes `dΘ/dx = −q`: `Θ` is linear
//! in depth (Incropera et al., *Fundamentals of Heat and Mass Transfer*,
//! §3.2, conduction with a temperature-dependent conductivity). So from a
//! point at `T_in` the temperature a depth `s` further along the flux solves
//!
//! `∫_{T_in}^{T} k dT' = −q s`,
//!
//! which [`Conductivity::step`] solves for `T` (`s` may be negative, to
//! march against the flux); [`Conductivity::inverse`] is the same inverse
//! transform for a given potential, as the quadratic model needs it. `k > 0` makes `Θ` strictly increasing, so the
//! root is unique; `k_min ≤ k ≤ k_max` brackets it between
//! `T_in − q s / k_min` and `T_in − q s / k_max`.
//!
//! # The inversion
//!
//! Exact for a constant `k`. Otherwise a Newton step on
//! `F(T) = ∫_{T_in}^{T} k − (−q s)` (`F' = k(T) > 0`) is taken when it stays
//! inside the bracket, a bisection otherwise (the safeguarded Newton method
//! of Press et al., *Numerical Recipes*, §9.4, `rtsafe`). [`Property::integral`]
//! is exact for a piecewise-linear table, whose `Θ` is then piecewise
//! quadratic, so Newton converges quadratically within a segment. The
//! iteration stops when a step falls below the rounding of `F` (a few ulps
//! of `|T| + |T − T_in|`) or the bracket closes to adjacent doubles.
//!
//! # The marches that use it
//!
//! A steady layered wall is marched layer by layer with this step, a
//! contact resistance `R` on a layer's cold side dropping the temperature by
//! `q R` where the path crosses it (Incropera §3.1.4). Two outer loops use
//! it and differ on purpose: `physics::layered` marches once from the hot
//! face through every layer carrying the Jacobian of each face in the fitted
//! unknowns (hot face, flux, worn hot-layer thickness), while
//! `physics::transient` marches temperatures only, from any depth to any
//! other in either direction, to build its initial profile. The step and
//! its safeguards are shared; each loop keeps only what its caller needs.

use crate::physics::material::Property;

/// Most safeguarded-Newton steps of one inversion (Newton converges in a
/// handful; bisection alone would need about 60 per 2⁻⁵³ of range).
pub const MAX_INVERSION_STEPS: usize = 200;

/// A conductivity that is not a positive finite constant, a non-empty table
/// of positive values at strictly rising temperatures, or a polynomial
/// positive and finite over its range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("conductivity must be a positive constant or a valid table")]
pub struct InvalidConductivity;

/// Why a Kirchhoff step of a valid conductivity could not be taken.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum KirchhoffError {
    /// An input or the result is NaN or infinite.
    #[error("a Kirchhoff step met a number that is not finite")]
    NonFinite,
    /// The safeguarded iteration did not meet its tolerance.
    #[error("the Kirchhoff inversion did not converge after {iterations} iterations")]
    NotConverged { iterations: usize },
}

/// A conductivity checked valid, with the smallest and largest value it
/// takes at any temperature (which bracket every inversion).
#[derive(Debug, Clone, Copy)]
pub struct Conductivity<'a> {
    k: &'a Property,
    k_min: f64,
    k_max: f64,
}

impl<'a> Conductivity<'a> {
    /// Checks `k` (the fields of [`Property`] are public, so a value may
    /// not have passed its checked constructor, and [`Property::at`] would
    /// panic on an empty table) and finds its bounds.
    pub fn new(k: &'a Property) -> Result<Self, InvalidConductivity> {
        let (k_min, k_max) = checked_bounds(k).ok_or(InvalidConductivity)?;
        Ok(Conductivity { k, k_min, k_max })
    }

    /// The conductivity at `t_c`, W/(m·K).
    pub fn at(&self, t_c: f64) -> f64 {
        self.k.at(t_c)
    }

    /// The Kirchhoff mean conductivity between `a_c` and `b_c`.
    pub fn mean_between(&self, a_c: f64, b_c: f64) -> f64 {
        self.k.mean_between(a_c, b_c)
    }

    /// `(k_min, k_max)` over every temperature.
    pub fn bounds(&self) -> (f64, f64) {
        (self.k_min, self.k_max)
    }

    /// The temperature a depth `s_m` further along a flux `q_w_m2` from a
    /// point at `from_c`: `Θ(T) = Θ(from) − q s` (see the module docs).
    pub fn step(&self, from_c: f64, q_w_m2: f64, s_m: f64) -> Result<f64, KirchhoffError> {
        self.inverse(from_c, -(q_w_m2 * s_m))
    }

    /// The inverse transform: the temperature `T` with
    /// `∫_{from}^{T} k dT' = theta_w_m`, by the safeguarded Newton iteration
    /// of the module docs.
    pub fn inverse(&self, from_c: f64, theta_w_m: f64) -> Result<f64, KirchhoffError> {
        let target = theta_w_m;
        if let Property::Constant(k) = self.k {
            let t = from_c + target / k;
            return finite(t);
        }
        if target == 0.0 {
            return finite(from_c);
        }
        let a = from_c + target / self.k_min;
        let b = from_c + target / self.k_max;
        if !(a.is_finite() && b.is_finite()) {
            return Err(KirchhoffError::NonFinite);
        }
        let (mut lo, mut hi) = (a.min(b), a.max(b));
        let mut t = (from_c + target / self.k.at(from_c)).clamp(lo, hi);
        for _ in 0..MAX_INVERSION_STEPS {
            let f = self.k.integral(from_c, t) - target;
            if f == 0.0 {
                return Ok(t);
            }
            if f > 0.0 {
                hi = t;
            } else {
                lo = t;
            }
            let newton = t - f / self.k.at(t);
            let next = if newton > lo && newton < hi {
                newton
            } else {
                let mid = 0.5 * (lo + hi);
                if !(mid > lo && mid < hi) {
                    // The bracket is two adjacent doubles: done.
                    return Ok(mid);
                }
                mid
            };
            // Rounding of F is a few ulps of Θ ~ k (|T| + |T − from|).
            let tol = 4.0 * f64::EPSILON * (next.abs() + (next - from_c).abs());
            if (next - t).abs() <= tol {
                return Ok(next);
            }
            t = next;
        }
        Err(KirchhoffError::NotConverged {
            iterations: MAX_INVERSION_STEPS,
        })
    }
}

fn finite(t: f64) -> Result<f64, KirchhoffError> {
    if t.is_finite() {
        Ok(t)
    } else {
        Err(KirchhoffError::NonFinite)
    }
}

/// `(min k, max k)` of a valid conductivity, `None` for an invalid one.
fn checked_bounds(k: &Property) -> Option<(f64, f64)> {
    let positive = |v: f64| v.is_finite() && v > 0.0;
    match k {
        Property::Constant(v) => positive(*v).then_some((*v, *v)),
        Property::Table(pts) => {
            if pts.is_empty() {
                return None;
            }
            let mut bounds = (f64::INFINITY, 0.0_f64);
            let mut prev_t = f64::NEG_INFINITY;
            for &(t, v) in pts {
                if !(t.is_finite() && t > prev_t && positive(v)) {
                    return None;
                }
                prev_t = t;
                bounds = (bounds.0.min(v), bounds.1.max(v));
            }
            Some(bounds)
        }
        Property::Polynomial { coefficients, .. } => {
            if !coefficients.iter().all(|a| a.is_finite()) {
                return None;
            }
            k.bounds()
                .filter(|&(lo, hi)| positive(lo) && hi.is_finite())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use heapless::Vec as HVec;

    /// `k = a + b T` on 0…1500 °C as a polynomial property.
    fn linear_k(a: f64, b: f64) -> Property {
        Property::polynomial("k", &[a, b], 0.0, 1500.0).unwrap()
    }

    /// Closed form: `∫_{T1}^{T2} (a + b T) dT = a (T2 − T1) + b/2 (T2² − T1²)`.
    fn linear_integral(a: f64, b: f64, t1: f64, t2: f64) -> f64 {
        a * (t2 - t1) + 0.5 * b * (t2 * t2 - t1 * t1)
    }

    /// Closed form: `a (T − T1) + b/2 (T² − T1²) = −D` is the quadratic
    /// `(b/2) T² + a T − (a T1 + b/2 T1² − D) = 0`, whose root above
    /// −a/b (where `k > 0`) is `T = (−a + √((a + b T1)² − 2 b D)) / b`.
    fn linear_inverse(a: f64, b: f64, t1: f64, drop: f64) -> f64 {
        let k1 = a + b * t1;
        (-a + (k1 * k1 - 2.0 * b * drop).sqrt()) / b
    }

    #[test]
    fn constant_k_is_fouriers_law() {
        // Fourier's law through a slab of constant k: T = T_in − q s / k.
        let k = Property::Constant(1.25);
        let c = Conductivity::new(&k).unwrap();
        let t = c.step(1200.0, 2500.0, 0.23).unwrap();
        assert!((t - (1200.0 - 2500.0 * 0.23 / 1.25)).abs() < 1e-12);
        assert_eq!(c.bounds(), (1.25, 1.25));
    }

    #[test]
    fn linear_k_inversion_is_the_quadratic_root() {
        // k = 0.8 + 4e-4 T (W/m·K, T in °C), rising and falling flux.
        let (a, b) = (0.8, 4e-4);
        let k = linear_k(a, b);
        let c = Conductivity::new(&k).unwrap();
        for &(from, q, s) in &[
            (1350.0, 3200.0, 0.115),
            (900.0, 1500.0, 0.3),
            (260.0, -800.0, 0.05),
            (1100.0, 4000.0, -0.02),
        ] {
            let t = c.step(from, q, s).unwrap();
            let want = linear_inverse(a, b, from, q * s);
            assert!((t - want).abs() < 1e-9, "from {from}: {t} vs {want}");
            // And the transform itself: Θ(T) − Θ(T_in) = −q s.
            let theta = linear_integral(a, b, from, t);
            assert!((theta + q * s).abs() < 1e-9 * (q * s).abs().max(1.0));
        }
    }

    #[test]
    fn two_point_table_is_linear_k() {
        // A table through (0, a) and (1500, a + 1500 b) is k = a + b T on
        // its range: the same quadratic root.
        let (a, b) = (1.6, -3e-4);
        let mut pts = HVec::new();
        pts.push((0.0, a)).unwrap();
        pts.push((1500.0, a + 1500.0 * b)).unwrap();
        let k = Property::Table(pts);
        let c = Conductivity::new(&k).unwrap();
        assert_eq!(c.bounds(), (a + 1500.0 * b, a));
        let t = c.step(1400.0, 2000.0, 0.2).unwrap();
        let want = linear_inverse(a, b, 1400.0, 400.0);
        assert!((t - want).abs() < 1e-9, "{t} vs {want}");
    }

    #[test]
    fn inverse_undoes_the_integral_through_the_clamped_tails() {
        // k = 0.9 (1 + 5e-4 T) tabulated on 0…1400 °C, constant beyond:
        // Θ(T) = ∫_0^T k is exact for the table (trapezoids of a linear k),
        // so the inverse transform returns every T.
        let k = |t: f64| 0.9 * (1.0 + 5e-4 * t);
        let p = Property::table("k", &[(0.0, k(0.0)), (1400.0, k(1400.0))]).unwrap();
        let c = Conductivity::new(&p).unwrap();
        for t in [-50.0, 0.0, 25.0, 300.0, 786.57, 1200.0, 1600.0] {
            let back = c.inverse(0.0, p.integral(0.0, t)).unwrap();
            assert!((back - t).abs() < 1e-9, "{t} → {back}");
        }
        let two = Property::Constant(2.0);
        assert_eq!(
            Conductivity::new(&two).unwrap().inverse(10.0, 40.0),
            Ok(30.0)
        );
    }

    #[test]
    fn a_step_back_returns_to_the_start() {
        // Θ is linear in depth, so stepping s then −s is the identity.
        let k = linear_k(0.5, 6e-4);
        let c = Conductivity::new(&k).unwrap();
        let there = c.step(1250.0, 1800.0, 0.17).unwrap();
        let back = c.step(there, 1800.0, -0.17).unwrap();
        assert!((back - 1250.0).abs() < 1e-9);
    }

    #[test]
    fn bad_conductivity_and_bad_numbers_are_typed_errors() {
        let bad = [
            Property::Constant(0.0),
            Property::Constant(f64::NAN),
            Property::Table(HVec::new()),
            Property::Table(HVec::from_slice(&[(100.0, 1.0), (50.0, 1.2)]).unwrap()),
            Property::Table(HVec::from_slice(&[(100.0, -1.0)]).unwrap()),
        ];
        for k in &bad {
            assert_eq!(
                Conductivity::new(k).err(),
                Some(InvalidConductivity),
                "{k:?}"
            );
        }
        let k = linear_k(0.8, 4e-4);
        let c = Conductivity::new(&k).unwrap();
        assert_eq!(
            c.step(1000.0, f64::NAN, 0.1),
            Err(KirchhoffError::NonFinite)
        );
        assert_eq!(
            c.inverse(1000.0, f64::INFINITY),
            Err(KirchhoffError::NonFinite)
        );
        let k = Property::Constant(1.0);
        let c = Conductivity::new(&k).unwrap();
        assert_eq!(c.inverse(f64::NAN, 1.0), Err(KirchhoffError::NonFinite));
    }
}
