//! Thermocouple tolerance classes: the manufacturing limits of error of IEC
//! 60584-1:2013 (classes 1, 2, 3) and ASTM E230 Table 1 (standard and special
//! limits), and their conversion to a standard uncertainty.
//!
//! Each class defines, per thermocouple type and temperature range, a
//! tolerance `±max(fixed_c, fraction · |t|)`; IEC class 1 for types R and S is
//! instead `±1.0 °C` up to 1100 °C, then `±[1 + 0.003 (t − 1100)] °C` to
//! 1600 °C. The formulas and ranges are those listed in the project's
//! docs/references.md ("Thermocouple tolerances"). Where a class does not cover a
//! type or a temperature, [`tolerance_c`] returns `None`; the IEC 60584-1
//! class 3 bands for types E and T and the ASTM E230 bands below 0 °C are not
//! included yet because nobody here could read them in the standard.
//!
//! A tolerance is a bound, not a standard uncertainty: with nothing known but
//! the bound, the reading is taken as uniformly distributed within it, whose
//! standard uncertainty is `a / √3` (GUM, JCGM 100:2008, 4.3.7).

use super::thermocouple::TcType;

crate::word_enum! {
    /// A manufacturing tolerance class of a thermocouple (wire or assembly).
    #[derive(Clone, Copy, Debug, PartialEq, Eq)]
    pub enum ToleranceClass {
        /// IEC 60584-1:2013 class 1.
        Iec1 = "iec-class-1",
        /// IEC 60584-1:2013 class 2.
        Iec2 = "iec-class-2",
        /// IEC 60584-1:2013 class 3.
        Iec3 = "iec-class-3",
        /// ASTM E230 standard limits of error.
        AstmStandard = "astm-standard",
        /// ASTM E230 special limits of error.
        AstmSpecial = "astm-special",
    }
}

/// How the tolerance grows with temperature inside a band.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Formula {
    /// `max(fixed_c, fraction · |t|)`.
    Greater { fixed_c: f64, fraction: f64 },
    /// `fixed_c` up to `knee_c`, then `fixed_c + slope · (t − knee_c)`
    /// (IEC 60584-1 class 1, types R and S).
    Knee {
        fixed_c: f64,
        knee_c: f64,
        slope: f64,
    },
}

/// One row of a tolerance table: a formula valid over `min_c..=max_c`.
#[derive(Clone, Copy, Debug, PartialEq)]
struct Band {
    min_c: f64,
    max_c: f64,
    formula: Formula,
}

const fn greater(min_c: f64, max_c: f64, fixed_c: f64, fraction: f64) -> Option<Band> {
    Some(Band {
        min_c,
        max_c,
        formula: Formula::Greater { fixed_c, fraction },
    })
}

/// The band a class defines for a type (one per class and type), or `None`.
/// Values: IEC 60584-1:2013 and ASTM E230 Table 1 as listed in docs/references.md.
fn band(class: ToleranceClass, tc: TcType) -> Option<Band> {
    use TcType::*;
    use ToleranceClass::*;
    match (class, tc) {
        // IEC 60584-1:2013 class 1.
        (Iec1, K | N) => greater(-40.0, 1000.0, 1.5, 0.004),
        (Iec1, J) => greater(-40.0, 750.0, 1.5, 0.004),
        (Iec1, T) => greater(-40.0, 350.0, 0.5, 0.004),
        (Iec1, E) => greater(-40.0, 800.0, 1.5, 0.004),
        // The lower end, 0 °C, is from memory (docs/references.md gives only "to 1600").
        (Iec1, R | S) => Some(Band {
            min_c: 0.0,
            max_c: 1600.0,
            formula: Formula::Knee {
                fixed_c: 1.0,
                knee_c: 1100.0,
                slope: 0.003,
            },
        }),
        (Iec1, B) => None,
        // IEC 60584-1:2013 class 2. R/S range 0…1600 °C is from memory.
        (Iec2, K | N) => greater(-40.0, 1200.0, 2.5, 0.0075),
        (Iec2, J) => greater(-40.0, 750.0, 2.5, 0.0075),
        (Iec2, T) => greater(-40.0, 350.0, 1.0, 0.0075),
        (Iec2, E) => greater(-40.0, 900.0, 2.5, 0.0075),
        (Iec2, R | S) => greater(0.0, 1600.0, 1.5, 0.0025),
        (Iec2, B) => greater(600.0, 1700.0, 0.0, 0.0025),
        // IEC 60584-1:2013 class 3 (E and T not included, see module doc).
        (Iec3, K | N) => greater(-200.0, 40.0, 2.5, 0.015),
        (Iec3, B) => greater(600.0, 1700.0, 4.0, 0.005),
        (Iec3, E | J | R | S | T) => None,
        // ASTM E230 Table 1, standard limits (°C, 0 °C and above).
        (AstmStandard, K | N) => greater(0.0, 1260.0, 2.2, 0.0075),
        (AstmStandard, J) => greater(0.0, 760.0, 2.2, 0.0075),
        (AstmStandard, T) => greater(0.0, 370.0, 1.0, 0.0075),
        (AstmStandard, E) => greater(0.0, 870.0, 1.7, 0.005),
        (AstmStandard, R | S) => greater(0.0, 1480.0, 1.5, 0.0025),
        (AstmStandard, B) => greater(870.0, 1700.0, 0.0, 0.005),
        // ASTM E230 Table 1, special limits.
        (AstmSpecial, K | N) => greater(0.0, 1260.0, 1.1, 0.004),
        (AstmSpecial, J) => greater(0.0, 760.0, 1.1, 0.004),
        (AstmSpecial, T) => greater(0.0, 370.0, 0.5, 0.004),
        (AstmSpecial, E) => greater(0.0, 870.0, 1.0, 0.004),
        (AstmSpecial, R | S) => greater(0.0, 1480.0, 0.6, 0.001),
        (AstmSpecial, B) => greater(870.0, 1700.0, 0.0, 0.0025),
    }
}

impl Band {
    #[inline]
    fn at(&self, t_c: f64) -> f64 {
        match self.formula {
            Formula::Greater { fixed_c, fraction } => fixed_c.max(fraction * t_c.abs()),
            Formula::Knee {
                fixed_c,
                knee_c,
                slope,
            } => {
                if t_c <= knee_c {
                    fixed_c
                } else {
                    fixed_c + slope * (t_c - knee_c)
                }
            }
        }
    }
}

/// Temperature range `(min, max)` in °C over which `class` states a
/// tolerance for `tc`, or `None` when it states none for that type.
pub fn tolerance_range_c(class: ToleranceClass, tc: TcType) -> Option<(f64, f64)> {
    band(class, tc).map(|b| (b.min_c, b.max_c))
}

/// Tolerance (± °C) of a `class` thermocouple of type `tc` at `t_c`: the
/// greater of the fixed band and the fraction of |t| (R/S class 1: the knee
/// formula). `None` when the class does not define that type or temperature
/// (including a NaN temperature).
#[inline]
pub fn tolerance_c(class: ToleranceClass, tc: TcType, t_c: f64) -> Option<f64> {
    let b = band(class, tc)?;
    if (b.min_c..=b.max_c).contains(&t_c) {
        Some(b.at(t_c))
    } else {
        None
    }
}

/// Standard uncertainty (°C) from the tolerance: `u = a / √3`, the
/// rectangular distribution of half-width `a` (GUM, JCGM 100:2008, 4.3.7).
#[inline]
pub fn standard_uncertainty_c(class: ToleranceClass, tc: TcType, t_c: f64) -> Option<f64> {
    tolerance_c(class, tc, t_c).map(|a| a / 3f64.sqrt())
}

/// A tolerance that may have been taken from the nearest edge of the class's
/// stated range.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NearestTolerance {
    /// Tolerance, ± °C.
    pub tolerance_c: f64,
    /// Temperature at which the formula was evaluated: `t_c` itself, or the
    /// nearest end of the stated range.
    pub evaluated_at_c: f64,
    /// True when `t_c` was outside the stated range and the edge value is
    /// used: the class makes no statement there, so this is an assumption
    /// the caller must report (e.g. as a degraded-quality flag).
    pub extended: bool,
}

/// Like [`tolerance_c`], but outside the stated range the band's value at
/// the nearest range end is used and flagged `extended`. This is the
/// fallback the monitor uses so that every reading carries an uncertainty;
/// it is a policy of ours, not of the standards. `None` when the class
/// defines no band for the type at all, or `t_c` is NaN.
pub fn tolerance_or_nearest_c(
    class: ToleranceClass,
    tc: TcType,
    t_c: f64,
) -> Option<NearestTolerance> {
    let b = band(class, tc)?;
    if t_c.is_nan() {
        return None;
    }
    let at = t_c.clamp(b.min_c, b.max_c);
    Some(NearestTolerance {
        tolerance_c: b.at(at),
        evaluated_at_c: at,
        extended: at != t_c,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use TcType::*;
    use ToleranceClass::*;

    fn tol(class: ToleranceClass, tc: TcType, t_c: f64) -> f64 {
        tolerance_c(class, tc, t_c).unwrap_or_else(|| panic!("{class:?} {tc} {t_c} undefined"))
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() < 1e-9
    }

    #[test]
    fn references_check_points() {
        // docs/references.md check points (IEC 60584-1:2013, ASTM E230 Table 1).
        assert!(close(tol(Iec1, K, 500.0), 2.0));
        assert!(close(tol(Iec2, K, 500.0), 3.75));
        assert!(close(tol(AstmStandard, K, 500.0), 3.75));
        assert!(close(tol(AstmSpecial, K, 500.0), 2.0));
        assert!(close(tol(Iec1, S, 1400.0), 1.9));
        assert!(close(tol(Iec2, S, 1400.0), 3.5));
    }

    /// Hand-computed from the IEC 60584-1:2013 formulas in docs/references.md.
    #[test]
    fn iec_bands_by_hand() {
        let cases = [
            // (class, type, t, expected ± °C)   hand computation
            (Iec1, K, 200.0, 1.5),   // max(1.5, 0.004·200 = 0.8)
            (Iec1, K, 1000.0, 4.0),  // 0.004·1000
            (Iec1, N, -40.0, 1.5),   // max(1.5, 0.16), range start
            (Iec2, K, 1200.0, 9.0),  // 0.0075·1200, range end
            (Iec2, N, 100.0, 2.5),   // max(2.5, 0.75)
            (Iec3, K, -200.0, 3.0),  // max(2.5, 0.015·200)
            (Iec3, N, -100.0, 2.5),  // max(2.5, 1.5)
            (Iec3, K, 40.0, 2.5),    // range end
            (Iec1, J, 750.0, 3.0),   // 0.004·750
            (Iec2, J, 750.0, 5.625), // 0.0075·750
            (Iec1, T, 100.0, 0.5),   // max(0.5, 0.4)
            (Iec1, T, 300.0, 1.2),   // 0.004·300
            (Iec2, T, 350.0, 2.625), // 0.0075·350
            (Iec1, E, 800.0, 3.2),   // 0.004·800
            (Iec2, E, 900.0, 6.75),  // 0.0075·900
            (Iec1, R, 1100.0, 1.0),  // fixed to the knee
            (Iec1, R, 1600.0, 2.5),  // 1 + 0.003·(1600 − 1100)
            (Iec2, R, 500.0, 1.5),   // max(1.5, 1.25)
            (Iec2, S, 1600.0, 4.0),  // 0.0025·1600
            (Iec2, B, 1000.0, 2.5),  // 0.0025·1000
            (Iec3, B, 700.0, 4.0),   // max(4, 3.5)
            (Iec3, B, 1700.0, 8.5),  // 0.005·1700
        ];
        for (class, tc, t, expect) in cases {
            assert!(
                close(tol(class, tc, t), expect),
                "{class:?} {tc} {t}: {} vs {expect}",
                tol(class, tc, t)
            );
        }
    }

    /// Hand-computed from the ASTM E230 Table 1 formulas in docs/references.md.
    #[test]
    fn astm_bands_by_hand() {
        let cases = [
            (AstmStandard, K, 100.0, 2.2),   // max(2.2, 0.75)
            (AstmStandard, N, 1260.0, 9.45), // 0.0075·1260
            (AstmSpecial, K, 1260.0, 5.04),  // 0.004·1260
            (AstmSpecial, K, 100.0, 1.1),    // max(1.1, 0.4)
            (AstmStandard, J, 760.0, 5.7),   // 0.0075·760
            (AstmSpecial, J, 760.0, 3.04),   // 0.004·760
            (AstmStandard, T, 370.0, 2.775), // 0.0075·370
            (AstmSpecial, T, 100.0, 0.5),    // max(0.5, 0.4)
            (AstmStandard, E, 870.0, 4.35),  // 0.005·870
            (AstmStandard, E, 200.0, 1.7),   // max(1.7, 1.0)
            (AstmSpecial, E, 200.0, 1.0),    // max(1.0, 0.8)
            (AstmStandard, R, 1480.0, 3.7),  // 0.0025·1480
            (AstmSpecial, S, 1480.0, 1.48),  // 0.001·1480
            (AstmSpecial, R, 400.0, 0.6),    // max(0.6, 0.4)
            (AstmStandard, B, 1000.0, 5.0),  // 0.005·1000
            (AstmSpecial, B, 1700.0, 4.25),  // 0.0025·1700
        ];
        for (class, tc, t, expect) in cases {
            assert!(
                close(tol(class, tc, t), expect),
                "{class:?} {tc} {t}: {} vs {expect}",
                tol(class, tc, t)
            );
        }
    }

    #[test]
    fn undefined_types_and_temperatures_are_none() {
        let cases = [
            (Iec1, B, 1000.0),        // IEC class 1 has no type B
            (Iec3, J, 0.0),           // no class 3 for J
            (Iec1, K, 1000.5),        // above 1000 °C
            (Iec1, K, -40.5),         // below −40 °C
            (Iec3, K, 41.0),          // class 3 ends at 40 °C
            (Iec2, J, 760.0),         // J classes end at 750 °C
            (Iec2, B, 599.0),         // B from 600 °C
            (AstmStandard, K, -10.0), // sub-zero ASTM limits not included
            (AstmStandard, B, 800.0), // ASTM B from 870 °C
            (AstmSpecial, R, 1500.0), // ASTM R/S to 1480 °C
            (Iec2, K, f64::NAN),
            (Iec2, K, f64::INFINITY),
        ];
        for (class, tc, t) in cases {
            assert_eq!(tolerance_c(class, tc, t), None, "{class:?} {tc} {t}");
            assert_eq!(standard_uncertainty_c(class, tc, t), None);
        }
    }

    #[test]
    fn standard_uncertainty_is_rectangular() {
        // GUM 4.3.7: u = a/√3; K class 2 at 500 °C: 3.75/1.7320508 = 2.16506.
        let u = standard_uncertainty_c(Iec2, K, 500.0).unwrap();
        assert!((u - 2.16506).abs() < 1e-5, "{u}");
    }

    #[test]
    fn bands_are_continuous_and_positive() {
        // No jumps inside a band (the R/S knee joins at 1100 °C), and every
        // defined tolerance is positive and finite.
        for &class in ToleranceClass::ALL {
            for tc in TcType::ALL {
                let Some((lo, hi)) = tolerance_range_c(class, tc) else {
                    continue;
                };
                assert!(lo < hi);
                let mut prev = tol(class, tc, lo);
                for i in 1..=1000 {
                    let t = lo + (hi - lo) * f64::from(i) / 1000.0;
                    let a = tol(class, tc, t);
                    assert!(a.is_finite() && a > 0.0, "{class:?} {tc} {t}");
                    assert!((a - prev).abs() < 0.02, "{class:?} {tc} jump at {t}");
                    prev = a;
                }
            }
        }
    }

    #[test]
    fn nearest_edge_fallback_says_so() {
        // K class 1 at 1300 °C: the class stops at 1000 °C (4.0 there).
        let n = tolerance_or_nearest_c(Iec1, K, 1300.0).unwrap();
        assert!(close(n.tolerance_c, 4.0));
        assert_eq!(n.evaluated_at_c, 1000.0);
        assert!(n.extended);
        // Inside the range it is the plain value, not extended.
        let n = tolerance_or_nearest_c(Iec1, K, 500.0).unwrap();
        assert!(close(n.tolerance_c, 2.0) && !n.extended);
        // ASTM standard K below 0 °C: the 0 °C value, max(2.2, 0) = 2.2.
        let n = tolerance_or_nearest_c(AstmStandard, K, -50.0).unwrap();
        assert!(close(n.tolerance_c, 2.2) && n.extended);
        // No band at all, or no temperature: nothing to extend.
        assert_eq!(tolerance_or_nearest_c(Iec1, B, 1000.0), None);
        assert_eq!(tolerance_or_nearest_c(Iec2, K, f64::NAN), None);
    }

    #[test]
    fn names_round_trip() {
        for &class in ToleranceClass::ALL {
            assert_eq!(ToleranceClass::from_name(class.name()), Some(class));
        }
        assert_eq!(ToleranceClass::from_name("iec-class-1"), Some(Iec1));
        assert_eq!(ToleranceClass::from_name("astm-special"), Some(AstmSpecial));
        for bad in ["", "class-1", "IEC-CLASS-1", "astm"] {
            assert_eq!(ToleranceClass::from_name(bad), None, "{bad:?}");
        }
    }
}
