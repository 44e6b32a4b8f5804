//! Refractory, insulation and shell materials: conductivity as a constant or a
//! temperature table, density, specific heat, service limit.
//!
//! Pure values, no IO. The conductivity table is piecewise linear in
//! temperature and clamped at its ends (the caller that builds a table from a
//! config warns when readings leave it; see `Conductivity::covers`).

use heapless::Vec as HVec;

use crate::bounded::{Full, PushWithin};

/// Most points a conductivity or specific-heat table may have.
pub const MAX_TABLE_POINTS: usize = 16;

/// Errors building a material property from configuration values.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MaterialError {
    /// A property value must be finite and strictly positive.
    #[error("{what} must be a positive number, got {value}")]
    NotPositive { what: &'static str, value: f64 },
    /// A table needs at least one point and at most `MAX_TABLE_POINTS`.
    #[error("a table needs 1 to {MAX_TABLE_POINTS} points, got {0}")]
    TableSize(usize),
    /// Table temperatures must rise strictly from one point to the next.
    #[error("table temperatures must rise strictly ({prev_c} °C then {next_c} °C)")]
    TableOrder { prev_c: f64, next_c: f64 },
    /// A fixed capacity was reached (the sizes are checked first, so this
    /// names a fault, never a shortened table).
    #[error(transparent)]
    Capacity(#[from] Full),
}

/// A property that is constant, tabulated against temperature (piecewise
/// linear between points) or a polynomial, clamped beyond its range.
// The table is inline (fixed capacity, no heap); properties live in the
// settings and are not moved around, so the size difference is harmless.
#[allow(clippy::large_enum_variant)]
#[derive(Debug, Clone, PartialEq)]
pub enum Property {
    Constant(f64),
    /// Points `(t_c, value)`, temperatures strictly rising.
    Table(HVec<(f64, f64), MAX_TABLE_POINTS>),
    /// `a0 + a1 T + a2 T² + …` (T in °C) on `from_c..=to_c`, clamped to its
    /// end values outside; evaluated and integrated exactly.
    Polynomial {
        coefficients: HVec<f64, MAX_POLYNOMIAL_TERMS>,
        from_c: f64,
        to_c: f64,
    },
}

/// Most coefficients of a polynomial property (degree 4).
pub const MAX_POLYNOMIAL_TERMS: usize = 5;

/// Samples over the range when bounding a polynomial.
const POLYNOMIAL_BOUND_SAMPLES: usize = 1000;

fn horner(c: &[f64], t: f64) -> f64 {
    c.iter().rev().fold(0.0, |acc, a| acc * t + a)
}

/// Antiderivative `Σ a_i T^(i+1)/(i+1)`.
fn horner_integral(c: &[f64], t: f64) -> f64 {
    c.iter()
        .enumerate()
        .rev()
        .fold(0.0, |acc, (i, a)| acc * t + a / (i + 1) as f64)
        * t
}

fn horner_slope(c: &[f64], t: f64) -> f64 {
    c.iter()
        .enumerate()
        .skip(1)
        .rev()
        .fold(0.0, |acc, (i, a)| acc * t + a * i as f64)
}

impl Property {
    /// A constant, checked finite and positive.
    pub fn constant(what: &'static str, value: f64) -> Result<Self, MaterialError> {
        check_positive(what, value)?;
        Ok(Property::Constant(value))
    }

    /// A table from `(t_c, value)` points, checked: 1..=16 points, strictly
    /// rising temperatures, positive finite values.
    pub fn table(what: &'static str, points: &[(f64, f64)]) -> Result<Self, MaterialError> {
        if points.is_empty() || points.len() > MAX_TABLE_POINTS {
            return Err(MaterialError::TableSize(points.len()));
        }
        let mut v = HVec::new();
        for (i, &(t, k)) in points.iter().enumerate() {
            if !t.is_finite() {
                return Err(MaterialError::NotPositive {
                    what: "table temperature (finite)",
                    value: t,
                });
            }
            check_positive(what, k)?;
            if i > 0 {
                let prev = points[i - 1].0;
                if t <= prev {
                    return Err(MaterialError::TableOrder {
                        prev_c: prev,
                        next_c: t,
                    });
                }
            }
            v.push_within((t, k), "table points")?;
        }
        Ok(Property::Table(v))
    }

    /// A polynomial on `from_c..=to_c`, checked: 1 to 5 finite
    /// coefficients, a finite rising range, positive over all of it.
    pub fn polynomial(
        what: &'static str,
        coefficients: &[f64],
        from_c: f64,
        to_c: f64,
    ) -> Result<Self, MaterialError> {
        if coefficients.is_empty() || coefficients.len() > MAX_POLYNOMIAL_TERMS {
            return Err(MaterialError::TableSize(coefficients.len()));
        }
        let mut c = HVec::new();
        for &a in coefficients {
            if !a.is_finite() {
                return Err(MaterialError::NotPositive {
                    what: "polynomial coefficient (finite)",
                    value: a,
                });
            }
            c.push_within(a, "polynomial coefficients")?;
        }
        if !(from_c.is_finite() && to_c.is_finite() && from_c < to_c) {
            return Err(MaterialError::NotPositive {
                what: "polynomial range (from_c < to_c)",
                value: to_c - from_c,
            });
        }
        let p = Property::Polynomial {
            coefficients: c,
            from_c,
            to_c,
        };
        match p.bounds() {
            Some((lo, _)) if lo > 0.0 => Ok(p),
            _ => Err(MaterialError::NotPositive {
                what,
                value: p.bounds().map_or(f64::NAN, |b| b.0),
            }),
        }
    }

    /// Smallest and largest value at any temperature (clamped ends
    /// included); for a polynomial from 1000 samples of its range and its
    /// ends, widened by 2 % of the spread and 1e-9 of the value so that a
    /// bracket built on them holds. `None` for an empty table.
    pub fn bounds(&self) -> Option<(f64, f64)> {
        match self {
            Property::Constant(v) => Some((*v, *v)),
            Property::Table(pts) => (!pts.is_empty()).then(|| {
                pts.iter()
                    .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &(_, v)| {
                        (lo.min(v), hi.max(v))
                    })
            }),
            Property::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => {
                let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
                for i in 0..=POLYNOMIAL_BOUND_SAMPLES {
                    let t = from_c + (to_c - from_c) * i as f64 / POLYNOMIAL_BOUND_SAMPLES as f64;
                    let v = horner(coefficients, t);
                    lo = lo.min(v);
                    hi = hi.max(v);
                }
                let pad = 0.02 * (hi - lo) + 1e-9 * hi.abs();
                Some((lo - pad, hi + pad))
            }
        }
    }

    /// The value at `t_c`: linear interpolation, clamped outside the table.
    pub fn at(&self, t_c: f64) -> f64 {
        match self {
            Property::Constant(k) => *k,
            Property::Table(pts) => {
                let first = pts[0];
                let last = pts[pts.len() - 1];
                if t_c <= first.0 {
                    return first.1;
                }
                if t_c >= last.0 {
                    return last.1;
                }
                for w in pts.windows(2) {
                    let (t0, k0) = w[0];
                    let (t1, k1) = w[1];
                    if t_c <= t1 {
                        return k0 + (k1 - k0) * (t_c - t0) / (t1 - t0);
                    }
                }
                last.1
            }
            Property::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => horner(coefficients, t_c.clamp(*from_c, *to_c)),
        }
    }

    /// Derivative d(value)/dT at `t_c` (zero for a constant and outside a
    /// table; the slope of the segment containing `t_c` otherwise).
    pub fn slope_at(&self, t_c: f64) -> f64 {
        match self {
            Property::Constant(_) => 0.0,
            Property::Table(pts) => {
                if pts.len() < 2 || t_c < pts[0].0 || t_c > pts[pts.len() - 1].0 {
                    return 0.0;
                }
                for w in pts.windows(2) {
                    let (t0, k0) = w[0];
                    let (t1, k1) = w[1];
                    if t_c <= t1 {
                        return (k1 - k0) / (t1 - t0);
                    }
                }
                0.0
            }
            Property::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => {
                if t_c < *from_c || t_c > *to_c {
                    0.0
                } else {
                    horner_slope(coefficients, t_c)
                }
            }
        }
    }

    /// Kirchhoff integral `∫_{a}^{b} k(T) dT` (exact for the piecewise-linear
    /// table, including the clamped tails). Negative when `b < a`.
    pub fn integral(&self, a_c: f64, b_c: f64) -> f64 {
        match self {
            Property::Constant(k) => k * (b_c - a_c),
            Property::Table(_) => {
                if b_c < a_c {
                    return -self.integral(b_c, a_c);
                }
                // Integrate piecewise: split [a, b] at the table points; on
                // each piece the value is linear, so the trapezoid is exact.
                let mut sum = 0.0;
                let mut lo = a_c;
                if let Property::Table(pts) = self {
                    for &(t, _) in pts.iter() {
                        if t > lo && t < b_c {
                            sum += 0.5 * (self.at(lo) + self.at(t)) * (t - lo);
                            lo = t;
                        }
                    }
                }
                sum + 0.5 * (self.at(lo) + self.at(b_c)) * (b_c - lo)
            }
            Property::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => {
                if b_c < a_c {
                    return -self.integral(b_c, a_c);
                }
                // The clamped tails are constant; the middle in closed form.
                let below = (from_c.min(b_c) - a_c).max(0.0) * horner(coefficients, *from_c);
                let above = (b_c - to_c.max(a_c)).max(0.0) * horner(coefficients, *to_c);
                let (lo, hi) = (a_c.clamp(*from_c, *to_c), b_c.clamp(*from_c, *to_c));
                below + above + horner_integral(coefficients, hi)
                    - horner_integral(coefficients, lo)
            }
        }
    }

    /// Mean value over `[a, b]`: `∫k dT / (b − a)` (the value at `a` when the
    /// interval is empty). For conductivity this is the `k_m` of the
    /// Kirchhoff transform: `q = k_m (T1 − T2) / L` for a slab without source.
    pub fn mean_between(&self, a_c: f64, b_c: f64) -> f64 {
        if (b_c - a_c).abs() < 1e-12 {
            return self.at(a_c);
        }
        self.integral(a_c, b_c) / (b_c - a_c)
    }

    /// The same property times `factor` (every value; temperatures kept):
    /// a conductivity known only to within a factor, for propagating its
    /// uncertainty. No allocation (the table is inline).
    pub fn scaled(&self, factor: f64) -> Property {
        match self {
            Property::Constant(k) => Property::Constant(k * factor),
            Property::Table(pts) => {
                let mut v = pts.clone();
                for p in v.iter_mut() {
                    p.1 *= factor;
                }
                Property::Table(v)
            }
            Property::Polynomial {
                coefficients,
                from_c,
                to_c,
            } => {
                let mut c = coefficients.clone();
                for a in c.iter_mut() {
                    *a *= factor;
                }
                Property::Polynomial {
                    coefficients: c,
                    from_c: *from_c,
                    to_c: *to_c,
                }
            }
        }
    }

    /// Whether `t_c` lies inside the tabulated range (always true for a
    /// constant). Outside it the value is clamped, which a caller may warn of.
    pub fn covers(&self, t_c: f64) -> bool {
        match self {
            Property::Constant(_) => true,
            Property::Table(pts) => t_c >= pts[0].0 && t_c <= pts[pts.len() - 1].0,
            Property::Polynomial { from_c, to_c, .. } => t_c >= *from_c && t_c <= *to_c,
        }
    }
}

fn check_positive(what: &'static str, value: f64) -> Result<(), MaterialError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(MaterialError::NotPositive { what, value })
    }
}

/// A wall material as the physics needs it.
#[derive(Debug, Clone, PartialEq)]
pub struct Material {
    /// Thermal conductivity k, W/(m·K).
    pub conductivity_w_mk: Property,
    /// Density ρ, kg/m³.
    pub density_kg_m3: f64,
    /// Specific heat c_p, J/(kg·K).
    pub specific_heat_j_kgk: Property,
    /// Highest temperature the material may see in service, °C.
    pub max_service_c: Option<f64>,
}

impl Material {
    /// Thermal diffusivity α = k / (ρ c_p) at `t_c`, m²/s.
    pub fn diffusivity_m2_s(&self, t_c: f64) -> f64 {
        self.conductivity_w_mk.at(t_c) / (self.density_kg_m3 * self.specific_heat_j_kgk.at(t_c))
    }

    /// Volumetric heat capacity ρ c_p at `t_c`, J/(m³·K).
    pub fn heat_capacity_j_m3k(&self, t_c: f64) -> f64 {
        self.density_kg_m3 * self.specific_heat_j_kgk.at(t_c)
    }

    /// A material with constant properties (tests and the simulator).
    pub fn constant(k_w_mk: f64, density_kg_m3: f64, specific_heat_j_kgk: f64) -> Self {
        Material {
            conductivity_w_mk: Property::Constant(k_w_mk),
            density_kg_m3,
            specific_heat_j_kgk: Property::Constant(specific_heat_j_kgk),
            max_service_c: None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A table that is exactly linear, k = 0.9 (1 + 5e-4 T), must integrate to
    /// the closed form ∫k dT = 0.9 [T + 2.5e-4 T²] (elementary calculus).
    #[test]
    fn linear_table_integrates_exactly() {
        let k = |t: f64| 0.9 * (1.0 + 5e-4 * t);
        let p = Property::table(
            "k",
            &[(0.0, k(0.0)), (600.0, k(600.0)), (1400.0, k(1400.0))],
        )
        .unwrap();
        let closed = |t: f64| 0.9 * (t + 2.5e-4 * t * t);
        let got = p.integral(300.0, 1200.0);
        let want = closed(1200.0) - closed(300.0);
        assert!((got - want).abs() < 1e-9 * want, "{got} vs {want}");
        assert!((p.at(450.0) - k(450.0)).abs() < 1e-12);
        assert!((p.slope_at(450.0) - 0.9 * 5e-4).abs() < 1e-12);
    }

    /// Scaling multiplies every value and so every integral (linearity of
    /// the integral).
    #[test]
    fn scaled_property_scales_values_and_integral() {
        let p = Property::table("k", &[(200.0, 1.0), (1000.0, 1.4)]).unwrap();
        let s = p.scaled(1.15);
        assert!((s.at(600.0) - 1.15 * 1.2).abs() < 1e-12);
        assert!((s.integral(100.0, 900.0) - 1.15 * p.integral(100.0, 900.0)).abs() < 1e-9);
        assert_eq!(Property::Constant(2.0).scaled(0.5), Property::Constant(1.0));
        let q = Property::polynomial("k", &[0.8, 4e-4, 2e-7], 20.0, 1200.0).unwrap();
        let s = q.scaled(0.85);
        assert!((s.at(700.0) - 0.85 * q.at(700.0)).abs() < 1e-12);
        assert!((s.integral(100.0, 900.0) - 0.85 * q.integral(100.0, 900.0)).abs() < 1e-9);
    }

    #[test]
    fn table_clamps_outside() {
        let p = Property::table("k", &[(200.0, 1.0), (1000.0, 1.4)]).unwrap();
        assert_eq!(p.at(20.0), 1.0);
        assert_eq!(p.at(1500.0), 1.4);
        assert!(!p.covers(1500.0));
        // The clamped tail integrates at the end value: 1.0 × 180 below 200 °C.
        assert!((p.integral(20.0, 200.0) - 180.0).abs() < 1e-9);
    }

    #[test]
    fn bad_tables_are_errors() {
        assert!(matches!(
            Property::table("k", &[(500.0, 1.0), (400.0, 1.2)]),
            Err(MaterialError::TableOrder { .. })
        ));
        assert!(Property::table("k", &[]).is_err());
        assert!(Property::constant("k", -1.0).is_err());
        assert!(Property::constant("k", f64::NAN).is_err());
    }
}
