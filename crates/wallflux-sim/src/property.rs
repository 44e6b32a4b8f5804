//! The simulator's own reading of a material property curve: its value at a
//! temperature, its integral and mean over a range, its bounds. The curve is
//! the configuration's [`Property`] (a constant, a table linear between
//! points and clamped outside, or a polynomial on a range, clamped outside);
//! none of the core's evaluation or integration is used.
//!
//! Integrals are 3-point Gauss–Legendre on every piece between the curve's
//! kinks (table points, the polynomial's range ends, where the clamping
//! starts). The rule is exact for polynomials up to degree 5 (Abramowitz &
//! Stegun, *Handbook of Mathematical Functions*, 25.4.29 and Table 25.4), so
//! it is exact here: pieces are linear, constant, or a polynomial of degree
//! 4 at most.

use wallflux_core::physics::material::Property;

/// Gauss–Legendre abscissae on [−1, 1] (3 points): 0 and ±√(3/5).
const GL_X: [f64; 3] = [-0.774_596_669_241_483_4, 0.0, 0.774_596_669_241_483_4];
/// Their weights: 5/9, 8/9, 5/9.
const GL_W: [f64; 3] = [5.0 / 9.0, 8.0 / 9.0, 5.0 / 9.0];

/// Points per range when bounding a polynomial by sampling.
const BOUND_SAMPLES: usize = 1000;

/// Ranges narrower than this (°C) take the value at their middle as mean.
const NARROW_C: f64 = 1e-9;

/// The value at `t_c`; NaN for an empty table.
pub fn value_at(p: &Property, t_c: f64) -> f64 {
    match p {
        Property::Constant(v) => *v,
        Property::Table(pts) => table_at(pts, t_c),
        Property::Polynomial {
            coefficients,
            from_c,
            to_c,
        } => {
            let t = t_c.clamp(*from_c, *to_c);
            coefficients.iter().rev().fold(0.0, |acc, a| acc * t + a)
        }
    }
}

/// Linear between points, the end values outside.
fn table_at(pts: &[(f64, f64)], t_c: f64) -> f64 {
    let (Some(first), Some(last)) = (pts.first(), pts.last()) else {
        return f64::NAN;
    };
    if t_c <= first.0 {
        return first.1;
    }
    if t_c >= last.0 {
        return last.1;
    }
    let i = pts
        .partition_point(|&(t, _)| t <= t_c)
        .clamp(1, pts.len() - 1);
    let ((t0, v0), (t1, v1)) = (pts[i - 1], pts[i]);
    v0 + (v1 - v0) * (t_c - t0) / (t1 - t0)
}

/// `∫_a^b value dT` (negative when `b < a`; NaN for a NaN end).
pub fn integral(p: &Property, a_c: f64, b_c: f64) -> f64 {
    if let Property::Constant(v) = p {
        return v * (b_c - a_c);
    }
    if b_c < a_c {
        return -integral(p, b_c, a_c);
    }
    if a_c.is_nan() || b_c.is_nan() {
        return f64::NAN;
    }
    if a_c == b_c {
        return 0.0;
    }
    let mut total = 0.0;
    let mut from = a_c;
    for kink in kinks(p).filter(|&k| k > a_c && k < b_c) {
        total += gauss_legendre(p, from, kink);
        from = kink;
    }
    total + gauss_legendre(p, from, b_c)
}

/// Temperatures where the curve may bend, rising.
fn kinks(p: &Property) -> impl Iterator<Item = f64> + '_ {
    let (table, range): (&[(f64, f64)], [f64; 2]) = match p {
        Property::Constant(_) => (&[], [f64::NAN; 2]),
        Property::Table(pts) => (pts, [f64::NAN; 2]),
        Property::Polynomial { from_c, to_c, .. } => (&[], [*from_c, *to_c]),
    };
    table
        .iter()
        .map(|&(t, _)| t)
        .chain(range)
        .filter(|t| !t.is_nan())
}

/// One 3-point Gauss–Legendre panel over [a, b].
fn gauss_legendre(p: &Property, a_c: f64, b_c: f64) -> f64 {
    let half = 0.5 * (b_c - a_c);
    let mid = 0.5 * (a_c + b_c);
    half * GL_X
        .iter()
        .zip(GL_W)
        .map(|(x, w)| w * value_at(p, mid + half * x))
        .sum::<f64>()
}

/// The mean over [a, b] (either order), `∫ / (b − a)`; the value at the
/// middle for a range narrower than a nano-kelvin.
pub fn mean_between(p: &Property, a_c: f64, b_c: f64) -> f64 {
    if (b_c - a_c).abs() < NARROW_C {
        return value_at(p, 0.5 * (a_c + b_c));
    }
    integral(p, a_c, b_c) / (b_c - a_c)
}

/// Smallest and largest value: exact for a constant and a table (clamped at
/// its ends); for a polynomial, over its ends and [`BOUND_SAMPLES`] points
/// between. NaN for an empty table.
pub fn bounds(p: &Property) -> (f64, f64) {
    let fold = |vs: &mut dyn Iterator<Item = f64>| {
        vs.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        })
    };
    match p {
        Property::Constant(v) => (*v, *v),
        Property::Table(pts) if pts.is_empty() => (f64::NAN, f64::NAN),
        Property::Table(pts) => fold(&mut pts.iter().map(|&(_, v)| v)),
        Property::Polynomial { from_c, to_c, .. } => fold(
            &mut (0..=BOUND_SAMPLES)
                .map(|i| from_c + (to_c - from_c) * i as f64 / BOUND_SAMPLES as f64)
                .map(|t| value_at(p, t)),
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn poly(coefficients: &[f64], from_c: f64, to_c: f64) -> Property {
        Property::Polynomial {
            coefficients: heapless::Vec::from_slice(coefficients).expect("few terms"),
            from_c,
            to_c,
        }
    }

    #[test]
    fn table_integral_is_the_trapezoid_area_by_hand() {
        // k: 1.0 at 200, 1.2 at 800, clamped outside. From 0 to 1000 °C:
        // 200 × 1.0 (clamped) + 600 × 1.1 (trapezoid) + 200 × 1.2 (clamped)
        // = 200 + 660 + 240 = 1100 W/m.
        let k = Property::table("k", &[(200.0, 1.0), (800.0, 1.2)]).expect("table");
        assert!((integral(&k, 0.0, 1000.0) - 1100.0).abs() < 1e-9);
        assert!((integral(&k, 1000.0, 0.0) + 1100.0).abs() < 1e-9);
        // Between 500 and 600 (one linear piece): the mean of 1.1 and 1.1333….
        assert!((mean_between(&k, 500.0, 600.0) - (1.1 + 1.0 / 60.0)).abs() < 1e-12);
        assert!((value_at(&k, 500.0) - 1.1).abs() < 1e-12);
        assert_eq!(value_at(&k, -50.0), 1.0);
        assert_eq!(bounds(&k), (1.0, 1.2));
    }

    #[test]
    fn polynomial_integral_is_exact_and_clamped() {
        // 1 + 2T + 3T² + 4T³ + 5T⁴ on 0…2, clamped to its end values outside.
        // ∫_0^2 = 2 + 4 + 8 + 16 + 32 = 62; beyond 2 the value stays at
        // 1 + 4 + 12 + 32 + 80 = 129, so ∫_0^3 = 62 + 129.
        let p = poly(&[1.0, 2.0, 3.0, 4.0, 5.0], 0.0, 2.0);
        assert!((integral(&p, 0.0, 2.0) - 62.0).abs() < 1e-12);
        assert!((integral(&p, 0.0, 3.0) - 191.0).abs() < 1e-12);
        assert!((integral(&p, -1.0, 0.0) - 1.0).abs() < 1e-12);
        assert_eq!(value_at(&p, 5.0), 129.0);
        let (lo, hi) = bounds(&p);
        assert!((lo - 1.0).abs() < 1e-12 && (hi - 129.0).abs() < 1e-12);
    }

    #[test]
    fn narrow_ranges_and_empty_tables() {
        let k = Property::Constant(0.9);
        assert_eq!(mean_between(&k, 300.0, 300.0), 0.9);
        assert_eq!(integral(&k, 100.0, 50.0), -45.0);
        let empty = Property::Table(heapless::Vec::new());
        assert!(value_at(&empty, 20.0).is_nan());
        assert!(bounds(&empty).0.is_nan());
        assert!(integral(
            &Property::table("k", &[(0.0, 1.0)]).expect("table"),
            f64::NAN,
            1.0
        )
        .is_nan());
    }
}
