//! ITS-90 thermocouple reference functions for the eight letter-designated
//! types (B, E, J, K, N, R, S, T): EMF from temperature, temperature from EMF,
//! cold-junction compensation and the Seebeck coefficient.
//!
//! # Source
//! Reference functions and inverse polynomials (starting values) are those of NIST
//! Monograph 175 (Burns, Scroger, Strouse, Croarkin and Guthrie, 1993), as
//! distributed in the NIST ITS-90 Thermocouple Database, NIST SRD 60. The
//! coefficients below were typed in from the coefficient sections of the SRD 60
//! files `type_b.tab` … `type_t.tab` (as carried in the source distribution of
//! the PyPI package `thermocouple-its90` 1.0.2, `tests/data/nist/`), in the
//! same notation, so that each line can be checked against its source. Every
//! tabulated point of those tables is re-checked by
//! `tests/thermocouple_reference.rs`.
//!
//! # Conventions
//! - Temperatures in °C (ITS-90, `t_90`), EMF in mV, reference junction at
//!   0 °C unless a cold-junction temperature is passed.
//! - Forward: `E(t) = Σ cᵢ tⁱ`, plus `a₀ exp(a₁ (t − a₂)²)` for type K above
//!   0 °C. A temperature on a boundary between two subranges uses the lower
//!   subrange (the two agree there to within 0.075 µV).
//! - Inverse: the published inverse polynomial `t = Σ dᵢ Eⁱ` only gives the starting value of a
//!   safeguarded Newton iteration on the exact forward function (bisection
//!   whenever a Newton step would leave the current bracket), stopped at a
//!   step under [`INVERSE_TOLERANCE_C`]. Where no published inverse covers the
//!   EMF (the cryogenic tails of E, K, N and T below −200 °C; the last few
//!   microvolts past some rounded range ends) the starting value is interpolated.
//! - Out-of-range or non-finite input is a [`TcError`], never an extrapolated
//!   number.
//! - Type B is not monotonic below about 42 °C (its EMF dips to −0.0026 mV
//!   near 21 °C), so it is inverted only from 250 °C (E = 0.291 mV, the lower
//!   end of NIST's first type B inverse range) up to 1820 °C.
//!
//! Everything here is allocation-free, branch-light and `#[inline]`: one
//! forward conversion is one Horner evaluation (plus one `exp` for type K
//! above 0 °C); an inverse takes typically two or three Newton steps.

use core::fmt;

/// Newton iteration on the forward function stops once a step is smaller
/// than this (°C); the step is still applied, so the remaining error is of
/// the order of its square. The floor is rounding: in the cryogenic tails of
/// types E and T (14th-degree polynomials, terms up to 1e4 mV cancelling to
/// −6 mV, Seebeck near 0.001 mV/°C) E(t) itself is only good to about
/// 4e-11 mV, i.e. 4e-8 °C, which a tighter stop could not resolve.
pub const INVERSE_TOLERANCE_C: f64 = 1e-7;

/// Most forward evaluations of one inverse. A typical inversion takes two or
/// three, at most five (tested); pure bisection over the widest range
/// (2090 °C) would reach [`INVERSE_TOLERANCE_C`] in 35 halvings, so the cap
/// only bounds the cost of a case nobody has found.
const MAX_INVERSE_ITERATIONS: u32 = 48;

/// The eight letter-designated thermocouple types of IEC 60584-1 / ASTM E230.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum TcType {
    /// Pt-30 %Rh / Pt-6 %Rh.
    B,
    /// Ni-Cr / Cu-Ni (chromel–constantan).
    E,
    /// Fe / Cu-Ni (iron–constantan).
    J,
    /// Ni-Cr / Ni-Al (chromel–alumel).
    K,
    /// Ni-Cr-Si / Ni-Si (nicrosil–nisil).
    N,
    /// Pt-13 %Rh / Pt.
    R,
    /// Pt-10 %Rh / Pt.
    S,
    /// Cu / Cu-Ni (copper–constantan).
    T,
}

impl TcType {
    /// All eight types, in letter order.
    pub const ALL: [TcType; 8] = [
        TcType::B,
        TcType::E,
        TcType::J,
        TcType::K,
        TcType::N,
        TcType::R,
        TcType::S,
        TcType::T,
    ];

    /// The type named by one letter, either case: `"K"` or `"k"`.
    pub fn from_letter(s: &str) -> Option<TcType> {
        match s {
            "B" | "b" => Some(TcType::B),
            "E" | "e" => Some(TcType::E),
            "J" | "j" => Some(TcType::J),
            "K" | "k" => Some(TcType::K),
            "N" | "n" => Some(TcType::N),
            "R" | "r" => Some(TcType::R),
            "S" | "s" => Some(TcType::S),
            "T" | "t" => Some(TcType::T),
            _ => None,
        }
    }

    /// The type's letter, upper case.
    pub fn letter(self) -> char {
        match self {
            TcType::B => 'B',
            TcType::E => 'E',
            TcType::J => 'J',
            TcType::K => 'K',
            TcType::N => 'N',
            TcType::R => 'R',
            TcType::S => 'S',
            TcType::T => 'T',
        }
    }

    /// Range of the ITS-90 reference function `(min, max)` in °C, on which
    /// [`emf_mv`] and [`seebeck_mv_per_c`] are defined (NIST SRD 60).
    #[inline]
    pub fn range_c(self) -> (f64, f64) {
        let s = spec(self);
        (s.t_min_c, s.t_max_c)
    }

    /// Temperature range `(min, max)` in °C that [`temperature_c`] returns:
    /// the full reference range, except type B: 250 °C to 1820 °C.
    #[inline]
    pub fn inverse_range_c(self) -> (f64, f64) {
        let s = spec(self);
        (s.inv_t_min_c, s.t_max_c)
    }

    /// EMF `(min, max)` in mV, 0 °C reference, that [`temperature_c`]
    /// accepts: E at the ends of [`TcType::inverse_range_c`] (for type B,
    /// E(250 °C) = 0.2913 mV to E(1820 °C) = 13.820 mV).
    #[inline]
    pub fn emf_range_mv(self) -> (f64, f64) {
        let s = spec(self);
        (s.inv_mv_min, s.inv_mv_max)
    }
}

impl fmt::Display for TcType {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.letter())
    }
}

/// A number for a message: exponent form when huge (`1e308`, not 309
/// digits).
fn short(v: f64) -> String {
    if v.is_finite() && v.abs() >= 1e9 {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// As [`short`], with four decimals in the ordinary range.
fn short4(v: f64) -> String {
    if v.is_finite() && v.abs() >= 1e9 {
        format!("{v:e}")
    } else {
        format!("{v:.4}")
    }
}

/// Errors of the thermocouple conversions.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum TcError {
    /// The hot-junction temperature is outside the type's ITS-90 range.
    #[error("type {tc}: {} °C is outside the ITS-90 range {min} to {max} °C", short(*.celsius))]
    TemperatureOutOfRange {
        tc: TcType,
        celsius: f64,
        min: f64,
        max: f64,
    },
    /// The EMF, referred to a 0 °C junction, is outside the invertible range
    /// (a wiring fault, reversed polarity, wrong type or a broken amplifier).
    #[error(
        "type {tc}: {} mV (0 °C reference) is outside the invertible range {min:.3} to {max:.3} mV",
        short4(*.mv)
    )]
    EmfOutOfRange {
        tc: TcType,
        mv: f64,
        min: f64,
        max: f64,
    },
    /// The cold-junction temperature is outside the type's ITS-90 range.
    #[error("type {tc}: cold junction at {} °C is outside the ITS-90 range {min} to {max} °C", short(*.cj_c))]
    ColdJunctionOutOfRange {
        tc: TcType,
        cj_c: f64,
        min: f64,
        max: f64,
    },
    /// An input was NaN or infinite.
    #[error("type {tc}: {input} is not a finite number ({value})")]
    NotFinite {
        tc: TcType,
        input: &'static str,
        value: f64,
    },
}

/// ITS-90 reference function E(t) in mV, reference junction at 0 °C.
///
/// `E = Σ cᵢ tⁱ` (+ `a₀ exp(a₁ (t − a₂)²)` for type K above 0 °C), NIST
/// Monograph 175 / SRD 60 coefficients; defined over [`TcType::range_c`].
#[inline]
pub fn emf_mv(tc: TcType, celsius: f64) -> Result<f64, TcError> {
    let s = spec(tc);
    check_temperature(tc, s, celsius)?;
    Ok(emf_and_slope(s, celsius).0)
}

/// Hot-junction temperature in °C from an EMF in mV referred to 0 °C: the
/// exact inverse of [`emf_mv`] (required: better than 0.001 °C; in practice
/// about 1e-7 °C or better, see [`INVERSE_TOLERANCE_C`]). Exactly at a
/// subrange boundary, where NIST's adjoining polynomials differ by up to
/// 0.075 µV (type J at 760 °C), the root may lie up to a few 1e-7 °C on
/// either side.
///
/// Accepts [`TcType::emf_range_mv`]; returns a temperature within
/// [`TcType::inverse_range_c`].
#[inline]
pub fn temperature_c(tc: TcType, mv: f64) -> Result<f64, TcError> {
    let s = spec(tc);
    if !mv.is_finite() {
        return Err(TcError::NotFinite {
            tc,
            input: "EMF",
            value: mv,
        });
    }
    if !(s.inv_mv_min..=s.inv_mv_max).contains(&mv) {
        return Err(TcError::EmfOutOfRange {
            tc,
            mv,
            min: s.inv_mv_min,
            max: s.inv_mv_max,
        });
    }
    Ok(invert(s, mv).0)
}

/// Hot-junction temperature in °C from the EMF measured at terminals that sit
/// at `cj_c`: `t = E⁻¹(E_measured + E(t_cj))`.
///
/// This is cold-junction compensation done in EMF, the only correct way: the
/// thermocouple produces `E(t) − E(t_cj)`. Adding `t_cj` to the uncompensated
/// temperature instead is wrong wherever the Seebeck coefficient is not
/// constant (type K, 4.096 mV at 25 °C: 124.31 °C, not 125 °C). An
/// out-of-range sum is reported as [`TcError::EmfOutOfRange`] with `mv` the
/// compensated EMF, `E_measured + E(t_cj)`.
#[inline]
pub fn compensated_c(tc: TcType, measured_mv: f64, cj_c: f64) -> Result<f64, TcError> {
    if !measured_mv.is_finite() {
        return Err(TcError::NotFinite {
            tc,
            input: "measured EMF",
            value: measured_mv,
        });
    }
    let e_cj_mv = cold_junction_emf_mv(tc, cj_c)?;
    temperature_c(tc, measured_mv + e_cj_mv)
}

/// EMF in mV that a meter with its terminals at `cj_c` reads when the hot
/// junction is at `celsius`: `E(t) − E(t_cj)`. The inverse of
/// [`compensated_c`], for simulators and calibrator checks.
#[inline]
pub fn measured_mv(tc: TcType, celsius: f64, cj_c: f64) -> Result<f64, TcError> {
    let e_hot_mv = emf_mv(tc, celsius)?;
    let e_cj_mv = cold_junction_emf_mv(tc, cj_c)?;
    Ok(e_hot_mv - e_cj_mv)
}

/// Seebeck coefficient `dE/dt` in mV/°C at `celsius`: the analytic
/// derivative of the reference function, `Σ i cᵢ tⁱ⁻¹` (+ `2 a₁ (t − a₂)
/// a₀ exp(a₁ (t − a₂)²)` for type K above 0 °C). Divide an EMF uncertainty
/// by it to get a temperature uncertainty.
#[inline]
pub fn seebeck_mv_per_c(tc: TcType, celsius: f64) -> Result<f64, TcError> {
    let s = spec(tc);
    check_temperature(tc, s, celsius)?;
    Ok(emf_and_slope(s, celsius).1)
}

// ---------------------------------------------------------------------------
// Evaluation
// ---------------------------------------------------------------------------

#[inline]
fn check_temperature(tc: TcType, s: &Spec, celsius: f64) -> Result<(), TcError> {
    if !celsius.is_finite() {
        return Err(TcError::NotFinite {
            tc,
            input: "temperature",
            value: celsius,
        });
    }
    if !(s.t_min_c..=s.t_max_c).contains(&celsius) {
        return Err(TcError::TemperatureOutOfRange {
            tc,
            celsius,
            min: s.t_min_c,
            max: s.t_max_c,
        });
    }
    Ok(())
}

/// E(t_cj), with a cold-junction error naming the cold junction.
#[inline]
fn cold_junction_emf_mv(tc: TcType, cj_c: f64) -> Result<f64, TcError> {
    match emf_mv(tc, cj_c) {
        Ok(e) => Ok(e),
        Err(TcError::TemperatureOutOfRange { min, max, .. }) => {
            Err(TcError::ColdJunctionOutOfRange { tc, cj_c, min, max })
        }
        Err(TcError::NotFinite { value, .. }) => Err(TcError::NotFinite {
            tc,
            input: "cold-junction temperature",
            value,
        }),
        Err(other) => Err(other),
    }
}

/// E(t) and dE/dt at a temperature already checked to be in range, in one
/// Horner pass.
#[inline]
fn emf_and_slope(s: &Spec, t: f64) -> (f64, f64) {
    // The last piece ends at t_max_c, so for an in-range t the search always
    // succeeds; the fallback to the last piece only keeps this total.
    let piece = match s.forward.iter().find(|p| t <= p.t_max_c) {
        Some(p) => p,
        None => match s.forward.last() {
            Some(p) => p,
            None => return (f64::NAN, f64::NAN),
        },
    };
    let mut e = 0.0;
    let mut de = 0.0;
    for &c in piece.c.iter().rev() {
        de = de * t + e;
        e = e * t + c;
    }
    if let Some(x) = piece.exp {
        let u = t - x.a2;
        let g = x.a0 * (x.a1 * u * u).exp();
        e += g;
        de += g * 2.0 * x.a1 * u;
    }
    (e, de)
}

/// Published inverse polynomial where one covers `mv`, else a linear
/// interpolation across the uncovered stretch. Only a starting point.
#[inline]
fn start_c(s: &Spec, mv: f64) -> f64 {
    if let Some(p) = s
        .inverse
        .iter()
        .find(|p| (p.mv_min..=p.mv_max).contains(&mv))
    {
        return horner(p.d, mv);
    }
    match (s.inverse.first(), s.inverse.last()) {
        // Cryogenic tail (E, K, N, T below −200 °C): the Seebeck coefficient
        // falls almost to zero at −270 °C, so E is nearly quadratic in
        // (t − t_min) there; invert that shape rather than a straight line.
        (Some(first), _) if mv < first.mv_min => {
            let span_mv = first.mv_min - s.inv_mv_min;
            let frac = if span_mv > 0.0 {
                ((mv - s.inv_mv_min) / span_mv).max(0.0)
            } else {
                0.0
            };
            s.inv_t_min_c + (first.t_min_c - s.inv_t_min_c) * frac.sqrt()
        }
        // The last hundredths of a millivolt above the last published
        // inverse range (its end is a rounded table value): linear.
        (_, Some(last)) if s.inv_mv_max > last.mv_max => {
            let frac = (mv - last.mv_max) / (s.inv_mv_max - last.mv_max);
            last.t_max_c + (s.t_max_c - last.t_max_c) * frac
        }
        _ => s.t_max_c,
    }
}

/// Solve E(t) = mv for t in the inverse range: Newton from the starting value, kept
/// inside a shrinking bracket, bisecting whenever Newton would leave it.
/// Returns the temperature and the number of forward evaluations used.
#[inline]
fn invert(s: &Spec, mv: f64) -> (f64, u32) {
    let mut lo = s.inv_t_min_c;
    let mut hi = s.t_max_c;
    let mut t = start_c(s, mv).clamp(lo, hi);
    let mut n = 0;
    while n < MAX_INVERSE_ITERATIONS {
        n += 1;
        let (e, de) = emf_and_slope(s, t);
        let r = e - mv;
        if r == 0.0 {
            return (t, n);
        }
        if r < 0.0 {
            lo = t;
        } else {
            hi = t;
        }
        if de > 0.0 {
            // A root at a range end may lie a rounding error beyond it:
            // clamp to the range so the step lands on the end, not outside.
            let newton = (t - r / de).clamp(s.inv_t_min_c, s.t_max_c);
            // Test convergence before the bracket: a last step below one ulp
            // of t lands on the bracket end and must not trigger a bisection.
            if (newton - t).abs() <= INVERSE_TOLERANCE_C {
                return (newton, n);
            }
            if (lo..=hi).contains(&newton) {
                t = newton;
                continue;
            }
        }
        t = 0.5 * (lo + hi);
        if hi - lo <= INVERSE_TOLERANCE_C {
            return (t, n);
        }
    }
    (t, n)
}

#[inline]
fn horner(c: &[f64], x: f64) -> f64 {
    c.iter().rev().fold(0.0, |acc, &ci| acc * x + ci)
}

/// Polynomial part of the forward function, usable in constants. It leaves out
/// type K's exponential term, so it is only used where that term is absent
/// (t ≤ 0) or far below one ulp of E (at 1372 °C it is about 1e-81 mV); a test
/// checks the constants against the full function.
const fn poly_emf_const(forward: &[ForwardPiece], t: f64) -> f64 {
    let mut i = 0;
    while i < forward.len() {
        if t <= forward[i].t_max_c || i + 1 == forward.len() {
            let c = forward[i].c;
            let mut e = 0.0;
            let mut j = c.len();
            while j > 0 {
                j -= 1;
                e = e * t + c[j];
            }
            return e;
        }
        i += 1;
    }
    0.0
}

// ---------------------------------------------------------------------------
// Coefficients (NIST SRD 60, reproducing NIST Monograph 175)
// ---------------------------------------------------------------------------

/// Type K's extra term above 0 °C: `a0 exp(a1 (t − a2)²)`.
#[derive(Clone, Copy)]
struct ExpTerm {
    a0: f64,
    a1: f64,
    a2: f64,
}

/// One subrange of a reference function, from the previous piece's end (or
/// the range minimum) up to and including `t_max_c`.
struct ForwardPiece {
    t_max_c: f64,
    /// `c0, c1, …` in mV/°Cⁱ.
    c: &'static [f64],
    exp: Option<ExpTerm>,
}

/// One published approximate inverse `t = Σ dᵢ Eⁱ`, valid for
/// `mv_min..=mv_max` (↔ `t_min_c..=t_max_c`); used as a starting value only.
struct InversePiece {
    t_min_c: f64,
    t_max_c: f64,
    mv_min: f64,
    mv_max: f64,
    d: &'static [f64],
}

struct Spec {
    t_min_c: f64,
    t_max_c: f64,
    forward: &'static [ForwardPiece],
    inverse: &'static [InversePiece],
    /// Lowest temperature the inverse returns (type B: 250 °C).
    inv_t_min_c: f64,
    /// E(inv_t_min_c) and E(t_max_c).
    inv_mv_min: f64,
    inv_mv_max: f64,
}

impl Spec {
    const fn new(
        t_min_c: f64,
        inv_t_min_c: f64,
        forward: &'static [ForwardPiece],
        inverse: &'static [InversePiece],
    ) -> Spec {
        let t_max_c = match forward.last() {
            Some(p) => p.t_max_c,
            None => t_min_c,
        };
        Spec {
            t_min_c,
            t_max_c,
            forward,
            inverse,
            inv_t_min_c,
            inv_mv_min: poly_emf_const(forward, inv_t_min_c),
            inv_mv_max: poly_emf_const(forward, t_max_c),
        }
    }
}

#[inline]
fn spec(tc: TcType) -> &'static Spec {
    match tc {
        TcType::B => &SPEC_B,
        TcType::E => &SPEC_E,
        TcType::J => &SPEC_J,
        TcType::K => &SPEC_K,
        TcType::N => &SPEC_N,
        TcType::R => &SPEC_R,
        TcType::S => &SPEC_S,
        TcType::T => &SPEC_T,
    }
}

// Type B, NIST SRD 60 type_b.tab. Forward 0 to 630.615 to 1820 °C.
static SPEC_B: Spec = Spec::new(
    0.0,
    250.0,
    &[
        ForwardPiece {
            t_max_c: 630.615,
            c: &[
                0.000000000000E+00,
                -0.246508183460E-03,
                0.590404211710E-05,
                -0.132579316360E-08,
                0.156682919010E-11,
                -0.169445292400E-14,
                0.629903470940E-18,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1820.0,
            c: &[
                -0.389381686210E+01,
                0.285717474700E-01,
                -0.848851047850E-04,
                0.157852801640E-06,
                -0.168353448640E-09,
                0.111097940130E-12,
                -0.445154310330E-16,
                0.989756408210E-20,
                -0.937913302890E-24,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: 250.0,
            t_max_c: 700.0,
            mv_min: 0.291,
            mv_max: 2.431,
            d: &[
                9.8423321E+01,
                6.9971500E+02,
                -8.4765304E+02,
                1.0052644E+03,
                -8.3345952E+02,
                4.5508542E+02,
                -1.5523037E+02,
                2.9886750E+01,
                -2.4742860E+00,
            ],
        },
        InversePiece {
            t_min_c: 700.0,
            t_max_c: 1820.0,
            mv_min: 2.431,
            mv_max: 13.820,
            d: &[
                2.1315071E+02,
                2.8510504E+02,
                -5.2742887E+01,
                9.9160804E+00,
                -1.2965303E+00,
                1.1195870E-01,
                -6.0625199E-03,
                1.8661696E-04,
                -2.4878585E-06,
            ],
        },
    ],
);

// Type E, NIST SRD 60 type_e.tab. Forward −270 to 0 to 1000 °C.
static SPEC_E: Spec = Spec::new(
    -270.0,
    -270.0,
    &[
        ForwardPiece {
            t_max_c: 0.0,
            c: &[
                0.000000000000E+00,
                0.586655087080E-01,
                0.454109771240E-04,
                -0.779980486860E-06,
                -0.258001608430E-07,
                -0.594525830570E-09,
                -0.932140586670E-11,
                -0.102876055340E-12,
                -0.803701236210E-15,
                -0.439794973910E-17,
                -0.164147763550E-19,
                -0.396736195160E-22,
                -0.558273287210E-25,
                -0.346578420130E-28,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1000.0,
            c: &[
                0.000000000000E+00,
                0.586655087100E-01,
                0.450322755820E-04,
                0.289084072120E-07,
                -0.330568966520E-09,
                0.650244032700E-12,
                -0.191974955040E-15,
                -0.125366004970E-17,
                0.214892175690E-20,
                -0.143880417820E-23,
                0.359608994810E-27,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -200.0,
            t_max_c: 0.0,
            mv_min: -8.825,
            mv_max: 0.0,
            d: &[
                0.0000000E+00,
                1.6977288E+01,
                -4.3514970E-01,
                -1.5859697E-01,
                -9.2502871E-02,
                -2.6084314E-02,
                -4.1360199E-03,
                -3.4034030E-04,
                -1.1564890E-05,
            ],
        },
        InversePiece {
            t_min_c: 0.0,
            t_max_c: 1000.0,
            mv_min: 0.0,
            mv_max: 76.373,
            d: &[
                0.0000000E+00,
                1.7057035E+01,
                -2.3301759E-01,
                6.5435585E-03,
                -7.3562749E-05,
                -1.7896001E-06,
                8.4036165E-08,
                -1.3735879E-09,
                1.0629823E-11,
                -3.2447087E-14,
            ],
        },
    ],
);

// Type J, NIST SRD 60 type_j.tab. Forward −210 to 760 to 1200 °C.
static SPEC_J: Spec = Spec::new(
    -210.0,
    -210.0,
    &[
        ForwardPiece {
            t_max_c: 760.0,
            c: &[
                0.000000000000E+00,
                0.503811878150E-01,
                0.304758369300E-04,
                -0.856810657200E-07,
                0.132281952950E-09,
                -0.170529583370E-12,
                0.209480906970E-15,
                -0.125383953360E-18,
                0.156317256970E-22,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1200.0,
            c: &[
                0.296456256810E+03,
                -0.149761277860E+01,
                0.317871039240E-02,
                -0.318476867010E-05,
                0.157208190040E-08,
                -0.306913690560E-12,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -210.0,
            t_max_c: 0.0,
            mv_min: -8.095,
            mv_max: 0.0,
            d: &[
                0.0000000E+00,
                1.9528268E+01,
                -1.2286185E+00,
                -1.0752178E+00,
                -5.9086933E-01,
                -1.7256713E-01,
                -2.8131513E-02,
                -2.3963370E-03,
                -8.3823321E-05,
            ],
        },
        InversePiece {
            t_min_c: 0.0,
            t_max_c: 760.0,
            mv_min: 0.0,
            mv_max: 42.919,
            d: &[
                0.000000E+00,
                1.978425E+01,
                -2.001204E-01,
                1.036969E-02,
                -2.549687E-04,
                3.585153E-06,
                -5.344285E-08,
                5.099890E-10,
            ],
        },
        InversePiece {
            t_min_c: 760.0,
            t_max_c: 1200.0,
            mv_min: 42.919,
            mv_max: 69.553,
            d: &[
                -3.11358187E+03,
                3.00543684E+02,
                -9.94773230E+00,
                1.70276630E-01,
                -1.43033468E-03,
                4.73886084E-06,
            ],
        },
    ],
);

// Type K, NIST SRD 60 type_k.tab. Forward −270 to 0 to 1372 °C; above 0 °C
// E = Σ cᵢ tⁱ + a0 exp(a1 (t − a2)²).
static SPEC_K: Spec = Spec::new(
    -270.0,
    -270.0,
    &[
        ForwardPiece {
            t_max_c: 0.0,
            c: &[
                0.000000000000E+00,
                0.394501280250E-01,
                0.236223735980E-04,
                -0.328589067840E-06,
                -0.499048287770E-08,
                -0.675090591730E-10,
                -0.574103274280E-12,
                -0.310888728940E-14,
                -0.104516093650E-16,
                -0.198892668780E-19,
                -0.163226974860E-22,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1372.0,
            c: &[
                -0.176004136860E-01,
                0.389212049750E-01,
                0.185587700320E-04,
                -0.994575928740E-07,
                0.318409457190E-09,
                -0.560728448890E-12,
                0.560750590590E-15,
                -0.320207200030E-18,
                0.971511471520E-22,
                -0.121047212750E-25,
            ],
            exp: Some(ExpTerm {
                a0: 0.118597600000E+00,
                a1: -0.118343200000E-03,
                a2: 0.126968600000E+03,
            }),
        },
    ],
    &[
        InversePiece {
            t_min_c: -200.0,
            t_max_c: 0.0,
            mv_min: -5.891,
            mv_max: 0.0,
            d: &[
                0.0000000E+00,
                2.5173462E+01,
                -1.1662878E+00,
                -1.0833638E+00,
                -8.9773540E-01,
                -3.7342377E-01,
                -8.6632643E-02,
                -1.0450598E-02,
                -5.1920577E-04,
            ],
        },
        InversePiece {
            t_min_c: 0.0,
            t_max_c: 500.0,
            mv_min: 0.0,
            mv_max: 20.644,
            d: &[
                0.000000E+00,
                2.508355E+01,
                7.860106E-02,
                -2.503131E-01,
                8.315270E-02,
                -1.228034E-02,
                9.804036E-04,
                -4.413030E-05,
                1.057734E-06,
                -1.052755E-08,
            ],
        },
        InversePiece {
            t_min_c: 500.0,
            t_max_c: 1372.0,
            mv_min: 20.644,
            mv_max: 54.886,
            d: &[
                -1.318058E+02,
                4.830222E+01,
                -1.646031E+00,
                5.464731E-02,
                -9.650715E-04,
                8.802193E-06,
                -3.110810E-08,
            ],
        },
    ],
);

// Type N, NIST SRD 60 type_n.tab. Forward −270 to 0 to 1300 °C.
static SPEC_N: Spec = Spec::new(
    -270.0,
    -270.0,
    &[
        ForwardPiece {
            t_max_c: 0.0,
            c: &[
                0.000000000000E+00,
                0.261591059620E-01,
                0.109574842280E-04,
                -0.938411115540E-07,
                -0.464120397590E-10,
                -0.263033577160E-11,
                -0.226534380030E-13,
                -0.760893007910E-16,
                -0.934196678350E-19,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1300.0,
            c: &[
                0.000000000000E+00,
                0.259293946010E-01,
                0.157101418800E-04,
                0.438256272370E-07,
                -0.252611697940E-09,
                0.643118193390E-12,
                -0.100634715190E-14,
                0.997453389920E-18,
                -0.608632456070E-21,
                0.208492293390E-24,
                -0.306821961510E-28,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -200.0,
            t_max_c: 0.0,
            mv_min: -3.990,
            mv_max: 0.0,
            d: &[
                0.0000000E+00,
                3.8436847E+01,
                1.1010485E+00,
                5.2229312E+00,
                7.2060525E+00,
                5.8488586E+00,
                2.7754916E+00,
                7.7075166E-01,
                1.1582665E-01,
                7.3138868E-03,
            ],
        },
        InversePiece {
            t_min_c: 0.0,
            t_max_c: 600.0,
            mv_min: 0.0,
            mv_max: 20.613,
            d: &[
                0.00000E+00,
                3.86896E+01,
                -1.08267E+00,
                4.70205E-02,
                -2.12169E-06,
                -1.17272E-04,
                5.39280E-06,
                -7.98156E-08,
            ],
        },
        InversePiece {
            t_min_c: 600.0,
            t_max_c: 1300.0,
            mv_min: 20.613,
            mv_max: 47.513,
            d: &[
                1.972485E+01,
                3.300943E+01,
                -3.915159E-01,
                9.855391E-03,
                -1.274371E-04,
                7.767022E-07,
            ],
        },
    ],
);

// Type R, NIST SRD 60 type_r.tab. Forward −50 to 1064.18 to 1664.5 to 1768.1 °C.
static SPEC_R: Spec = Spec::new(
    -50.0,
    -50.0,
    &[
        ForwardPiece {
            t_max_c: 1064.18,
            c: &[
                0.000000000000E+00,
                0.528961729765E-02,
                0.139166589782E-04,
                -0.238855693017E-07,
                0.356916001063E-10,
                -0.462347666298E-13,
                0.500777441034E-16,
                -0.373105886191E-19,
                0.157716482367E-22,
                -0.281038625251E-26,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1664.5,
            c: &[
                0.295157925316E+01,
                -0.252061251332E-02,
                0.159564501865E-04,
                -0.764085947576E-08,
                0.205305291024E-11,
                -0.293359668173E-15,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1768.1,
            c: &[
                0.152232118209E+03,
                -0.268819888545E+00,
                0.171280280471E-03,
                -0.345895706453E-07,
                -0.934633971046E-14,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -50.0,
            t_max_c: 250.0,
            mv_min: -0.226,
            mv_max: 1.923,
            d: &[
                0.0000000E+00,
                1.8891380E+02,
                -9.3835290E+01,
                1.3068619E+02,
                -2.2703580E+02,
                3.5145659E+02,
                -3.8953900E+02,
                2.8239471E+02,
                -1.2607281E+02,
                3.1353611E+01,
                -3.3187769E+00,
            ],
        },
        InversePiece {
            t_min_c: 250.0,
            t_max_c: 1200.0,
            mv_min: 1.923,
            mv_max: 13.228,
            d: &[
                1.334584505E+01,
                1.472644573E+02,
                -1.844024844E+01,
                4.031129726E+00,
                -6.249428360E-01,
                6.468412046E-02,
                -4.458750426E-03,
                1.994710149E-04,
                -5.313401790E-06,
                6.481976217E-08,
            ],
        },
        InversePiece {
            t_min_c: 1064.0,
            t_max_c: 1664.5,
            mv_min: 11.361,
            mv_max: 19.739,
            d: &[
                -8.199599416E+01,
                1.553962042E+02,
                -8.342197663E+00,
                4.279433549E-01,
                -1.191577910E-02,
                1.492290091E-04,
            ],
        },
        InversePiece {
            t_min_c: 1664.5,
            t_max_c: 1768.1,
            mv_min: 19.739,
            mv_max: 21.103,
            d: &[
                3.406177836E+04,
                -7.023729171E+03,
                5.582903813E+02,
                -1.952394635E+01,
                2.560740231E-01,
            ],
        },
    ],
);

// Type S, NIST SRD 60 type_s.tab. Forward −50 to 1064.18 to 1664.5 to 1768.1 °C.
static SPEC_S: Spec = Spec::new(
    -50.0,
    -50.0,
    &[
        ForwardPiece {
            t_max_c: 1064.18,
            c: &[
                0.000000000000E+00,
                0.540313308631E-02,
                0.125934289740E-04,
                -0.232477968689E-07,
                0.322028823036E-10,
                -0.331465196389E-13,
                0.255744251786E-16,
                -0.125068871393E-19,
                0.271443176145E-23,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1664.5,
            c: &[
                0.132900444085E+01,
                0.334509311344E-02,
                0.654805192818E-05,
                -0.164856259209E-08,
                0.129989605174E-13,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 1768.1,
            c: &[
                0.146628232636E+03,
                -0.258430516752E+00,
                0.163693574641E-03,
                -0.330439046987E-07,
                -0.943223690612E-14,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -50.0,
            t_max_c: 250.0,
            mv_min: -0.235,
            mv_max: 1.874,
            d: &[
                0.00000000E+00,
                1.84949460E+02,
                -8.00504062E+01,
                1.02237430E+02,
                -1.52248592E+02,
                1.88821343E+02,
                -1.59085941E+02,
                8.23027880E+01,
                -2.34181944E+01,
                2.79786260E+00,
            ],
        },
        InversePiece {
            t_min_c: 250.0,
            t_max_c: 1200.0,
            mv_min: 1.874,
            mv_max: 11.950,
            d: &[
                1.291507177E+01,
                1.466298863E+02,
                -1.534713402E+01,
                3.145945973E+00,
                -4.163257839E-01,
                3.187963771E-02,
                -1.291637500E-03,
                2.183475087E-05,
                -1.447379511E-07,
                8.211272125E-09,
            ],
        },
        InversePiece {
            t_min_c: 1064.0,
            t_max_c: 1664.5,
            mv_min: 10.332,
            mv_max: 17.536,
            d: &[
                -8.087801117E+01,
                1.621573104E+02,
                -8.536869453E+00,
                4.719686976E-01,
                -1.441693666E-02,
                2.081618890E-04,
            ],
        },
        InversePiece {
            t_min_c: 1664.5,
            t_max_c: 1768.1,
            mv_min: 17.536,
            mv_max: 18.693,
            d: &[
                5.333875126E+04,
                -1.235892298E+04,
                1.092657613E+03,
                -4.265693686E+01,
                6.247205420E-01,
            ],
        },
    ],
);

// Type T, NIST SRD 60 type_t.tab. Forward −270 to 0 to 400 °C.
static SPEC_T: Spec = Spec::new(
    -270.0,
    -270.0,
    &[
        ForwardPiece {
            t_max_c: 0.0,
            c: &[
                0.000000000000E+00,
                0.387481063640E-01,
                0.441944343470E-04,
                0.118443231050E-06,
                0.200329735540E-07,
                0.901380195590E-09,
                0.226511565930E-10,
                0.360711542050E-12,
                0.384939398830E-14,
                0.282135219250E-16,
                0.142515947790E-18,
                0.487686622860E-21,
                0.107955392700E-23,
                0.139450270620E-26,
                0.797951539270E-30,
            ],
            exp: None,
        },
        ForwardPiece {
            t_max_c: 400.0,
            c: &[
                0.000000000000E+00,
                0.387481063640E-01,
                0.332922278800E-04,
                0.206182434040E-06,
                -0.218822568460E-08,
                0.109968809280E-10,
                -0.308157587720E-13,
                0.454791352900E-16,
                -0.275129016730E-19,
            ],
            exp: None,
        },
    ],
    &[
        InversePiece {
            t_min_c: -200.0,
            t_max_c: 0.0,
            mv_min: -5.603,
            mv_max: 0.0,
            d: &[
                0.0000000E+00,
                2.5949192E+01,
                -2.1316967E-01,
                7.9018692E-01,
                4.2527777E-01,
                1.3304473E-01,
                2.0241446E-02,
                1.2668171E-03,
            ],
        },
        InversePiece {
            t_min_c: 0.0,
            t_max_c: 400.0,
            mv_min: 0.0,
            mv_max: 20.872,
            d: &[
                0.000000E+00,
                2.592800E+01,
                -7.602961E-01,
                4.637791E-02,
                -2.165394E-03,
                6.048144E-05,
                -7.293422E-07,
            ],
        },
    ],
);

#[cfg(test)]
mod tests {
    use super::*;

    /// The NIST tables print EMF to 0.001 mV, so a correct reference function
    /// is within half a unit of the last digit (plus float noise).
    const HALF_TABLE_DIGIT_MV: f64 = 0.0005 + 1e-9;

    /// NIST ITS-90 table points (°C, mV, 0 °C reference) from NIST SRD 60
    /// `type_X.tab`, read from the copies in `tests/data/nist/` (taken from the
    /// source distribution of PyPI `thermocouple-its90` 1.0.2,
    /// `tests/data/nist/`). R and S are tabulated only to 1768 °C.
    const TABLE_POINTS: &[(TcType, &[(f64, f64)])] = &[
        (
            TcType::B,
            &[
                (0.0, 0.000),
                (20.0, -0.003),
                (100.0, 0.033),
                (250.0, 0.291),
                (500.0, 1.242),
                (630.0, 1.975),
                (631.0, 1.981),
                (700.0, 2.431),
                (1000.0, 4.834),
                (1200.0, 6.786),
                (1500.0, 10.099),
                (1800.0, 13.591),
                (1820.0, 13.820),
            ],
        ),
        (
            TcType::E,
            &[
                (-270.0, -9.835),
                (-250.0, -9.718),
                (-200.0, -8.825),
                (-100.0, -5.237),
                (0.0, 0.000),
                (100.0, 6.319),
                (300.0, 21.036),
                (500.0, 37.005),
                (700.0, 53.112),
                (900.0, 68.787),
                (1000.0, 76.373),
            ],
        ),
        (
            TcType::J,
            &[
                (-210.0, -8.095),
                (-200.0, -7.890),
                (-100.0, -4.633),
                (0.0, 0.000),
                (100.0, 5.269),
                (300.0, 16.327),
                (500.0, 27.393),
                (759.0, 42.855),
                (760.0, 42.919),
                (761.0, 42.983),
                (900.0, 51.877),
                (1100.0, 63.792),
                (1200.0, 69.553),
            ],
        ),
        (
            TcType::K,
            &[
                (-270.0, -6.458),
                (-250.0, -6.404),
                (-200.0, -5.891),
                (-100.0, -3.554),
                (0.0, 0.000),
                (25.0, 1.000),
                (100.0, 4.096),
                (200.0, 8.138),
                (300.0, 12.209),
                (500.0, 20.644),
                (700.0, 29.129),
                (1000.0, 41.276),
                (1200.0, 48.838),
                (1372.0, 54.886),
            ],
        ),
        (
            TcType::N,
            &[
                (-270.0, -4.345),
                (-250.0, -4.313),
                (-200.0, -3.990),
                (-100.0, -2.407),
                (0.0, 0.000),
                (100.0, 2.774),
                (300.0, 9.341),
                (600.0, 20.613),
                (900.0, 32.371),
                (1000.0, 36.256),
                (1200.0, 43.846),
                (1300.0, 47.513),
            ],
        ),
        (
            TcType::R,
            &[
                (-50.0, -0.226),
                (-10.0, -0.051),
                (0.0, 0.000),
                (100.0, 0.647),
                (250.0, 1.923),
                (600.0, 5.583),
                (1064.0, 11.361),
                (1065.0, 11.375),
                (1200.0, 13.228),
                (1400.0, 16.040),
                (1664.0, 19.732),
                (1665.0, 19.746),
                (1700.0, 20.222),
                (1768.0, 21.101),
            ],
        ),
        (
            TcType::S,
            &[
                (-50.0, -0.236),
                (-10.0, -0.053),
                (0.0, 0.000),
                (100.0, 0.646),
                (250.0, 1.874),
                (600.0, 5.239),
                (1064.0, 10.332),
                (1065.0, 10.344),
                (1200.0, 11.951),
                (1400.0, 14.373),
                (1664.0, 17.530),
                (1665.0, 17.542),
                (1700.0, 17.947),
                (1768.0, 18.693),
            ],
        ),
        (
            TcType::T,
            &[
                (-270.0, -6.258),
                (-250.0, -6.180),
                (-200.0, -5.603),
                (-150.0, -4.648),
                (-100.0, -3.379),
                (0.0, 0.000),
                (25.0, 0.992),
                (100.0, 4.279),
                (200.0, 9.288),
                (300.0, 14.862),
                (350.0, 17.819),
                (400.0, 20.872),
            ],
        ),
    ];

    #[test]
    fn forward_matches_nist_table_points() {
        for &(tc, points) in TABLE_POINTS {
            assert!(points.len() >= 8, "type {tc}: need at least 8 points");
            for &(t, table_mv) in points {
                let mv = emf_mv(tc, t).unwrap();
                assert!(
                    (mv - table_mv).abs() <= HALF_TABLE_DIGIT_MV,
                    "type {tc} at {t} °C: {mv:.6} mV, NIST SRD 60 table {table_mv:.3} mV"
                );
            }
        }
    }

    #[test]
    fn every_table_covers_both_range_ends() {
        for &(tc, points) in TABLE_POINTS {
            let (lo, hi) = tc.range_c();
            let first = points.first().unwrap().0;
            let last = points.last().unwrap().0;
            assert_eq!(first, lo, "type {tc}");
            // R and S end at 1768.1 °C; their tables stop at 1768 °C.
            assert!(
                hi - last < 0.5,
                "type {tc}: last point {last}, range end {hi}"
            );
        }
    }

    /// The forward function at the exact range ends is within the NIST table's
    /// rounding of the printed end values (NIST SRD 60 type_X.tab); for R and
    /// S (tables end at 1768 °C) the last printed value is one
    /// 0.1 °C-Seebeck step below: R 21.101 mV, S 18.693 mV at 1768 °C.
    #[test]
    fn emf_range_constants_are_the_function_at_the_range_ends() {
        for tc in TcType::ALL {
            let (t_lo, t_hi) = tc.inverse_range_c();
            let (mv_lo, mv_hi) = tc.emf_range_mv();
            // The constants are computed at compile time without type K's
            // exponential term; it is far below one ulp at both K ends.
            assert_eq!(mv_lo, emf_mv(tc, t_lo).unwrap(), "type {tc} low end");
            assert_eq!(mv_hi, emf_mv(tc, t_hi).unwrap(), "type {tc} high end");
        }
        // docs/references.md: type K minimum −6.458 mV (NIST SRD 60 type_k.tab).
        let (k_lo, k_hi) = TcType::K.emf_range_mv();
        assert!((k_lo - -6.458).abs() <= HALF_TABLE_DIGIT_MV);
        assert!((k_hi - 54.886).abs() <= HALF_TABLE_DIGIT_MV);
        // Type B inverts from 250 °C: 0.291 mV in NIST SRD 60 type_b.tab.
        let (b_lo, b_hi) = TcType::B.emf_range_mv();
        assert!((b_lo - 0.291).abs() <= HALF_TABLE_DIGIT_MV);
        assert!((b_hi - 13.820).abs() <= HALF_TABLE_DIGIT_MV);
        assert_eq!(TcType::B.inverse_range_c(), (250.0, 1820.0));
    }

    /// ITS-90 ranges (°C) as listed in docs/references.md (NIST SRD 60).
    #[test]
    fn ranges_are_the_its90_ranges() {
        let expect = [
            (TcType::B, 0.0, 1820.0),
            (TcType::E, -270.0, 1000.0),
            (TcType::J, -210.0, 1200.0),
            (TcType::K, -270.0, 1372.0),
            (TcType::N, -270.0, 1300.0),
            (TcType::R, -50.0, 1768.1),
            (TcType::S, -50.0, 1768.1),
            (TcType::T, -270.0, 400.0),
        ];
        for (tc, lo, hi) in expect {
            assert_eq!(tc.range_c(), (lo, hi), "type {tc}");
        }
    }

    /// Adjacent subranges of each reference function meet: NIST fitted them to
    /// join. The largest gap of the SRD 60 coefficients is 0.075 µV (type J at
    /// 760 °C, evaluated from the coefficients); a larger one means a
    /// mistyped coefficient.
    #[test]
    fn subranges_join_at_their_boundaries() {
        for tc in TcType::ALL {
            let s = spec(tc);
            for pair in s.forward.windows(2) {
                let b = pair[0].t_max_c;
                let lower = horner(pair[0].c, b);
                let mut upper = horner(pair[1].c, b);
                if let Some(x) = pair[1].exp {
                    upper += x.a0 * (x.a1 * (b - x.a2) * (b - x.a2)).exp();
                }
                assert!(
                    (lower - upper).abs() < 1e-7,
                    "type {tc} at {b} °C: {lower} vs {upper} mV"
                );
            }
        }
    }

    #[test]
    fn inverse_round_trips_over_every_full_range() {
        const STEPS: u32 = 20_000;
        for tc in TcType::ALL {
            let (lo, hi) = tc.inverse_range_c();
            let mut worst = 0.0f64;
            let mut most_evals = 0;
            for i in 0..=STEPS {
                let t = lo + (hi - lo) * f64::from(i) / f64::from(STEPS);
                let mv = emf_mv(tc, t).unwrap();
                let back = temperature_c(tc, mv).unwrap();
                worst = worst.max((back - t).abs());
                most_evals = most_evals.max(invert(spec(tc), mv).1);
            }
            // Requirement: exact inverse within 0.001 °C. The iteration stops
            // at 1e-7 °C steps (rounding floor about 4e-8 °C in the E and T
            // cryogenic tails), so 1e-6 °C still leaves margin.
            assert!(worst < 1e-6, "type {tc}: worst round trip {worst:e} °C");
            // Cost bound, not a timing: Newton from a published inverse start
            // converges quadratically (2 to 3 evaluations); the cryogenic
            // tails start from a cruder guess.
            assert!(most_evals <= 6, "type {tc}: {most_evals} evaluations");
        }
    }

    #[test]
    fn inverse_of_rounded_table_emf_is_not_the_table_temperature() {
        // docs/references.md: exact inverse of the rounded K table EMF 4.096 mV
        // is 99.994 °C (NIST SRD 60 type_k.tab, 100 °C → 4.096 mV).
        let t = temperature_c(TcType::K, 4.096).unwrap();
        assert!((t - 99.994).abs() < 0.0005, "{t}");
    }

    #[test]
    fn inverse_agrees_with_table_points_to_table_resolution() {
        // The table EMF is rounded to 0.001 mV, so the inverse of it is
        // within 0.0005 mV / Seebeck of the tabulated temperature.
        for &(tc, points) in TABLE_POINTS {
            let (lo, hi) = tc.emf_range_mv();
            for &(t, table_mv) in points {
                if !(lo..=hi).contains(&table_mv) {
                    continue; // B below 250 °C; a rounded end value may fall outside
                }
                let back = temperature_c(tc, table_mv).unwrap();
                let bound = HALF_TABLE_DIGIT_MV / seebeck_mv_per_c(tc, t).unwrap();
                assert!(
                    (back - t).abs() <= bound * 1.05,
                    "type {tc}: {table_mv} mV → {back} °C, table {t} °C"
                );
            }
        }
    }

    #[test]
    fn cold_junction_compensation_is_done_in_emf() {
        // docs/references.md: type K, 4.096 mV measured, terminals at 25 °C →
        // 124.31 °C (given to 0.01 °C, hence the 0.005 tolerance).
        let t = compensated_c(TcType::K, 4.096, 25.0).unwrap();
        assert!((t - 124.31).abs() < 0.005, "{t}");
        // Adding temperatures instead (E⁻¹(4.096) + 25 ≈ 124.994 °C) is more
        // than 0.5 °C wrong, because K's Seebeck coefficient is not constant.
        let naive = temperature_c(TcType::K, 4.096).unwrap() + 25.0;
        assert!((naive - 125.0).abs() < 0.01, "{naive}");
        assert!(naive - t > 0.5, "naive {naive}, compensated {t}");
    }

    #[test]
    fn measured_emf_is_the_inverse_of_compensation() {
        // E(t) − E(t_cj): type K 500 °C, 25 °C terminals: 20.644 − 1.000 mV
        // (NIST SRD 60 type_k.tab), within the two values' rounding.
        let mv = measured_mv(TcType::K, 500.0, 25.0).unwrap();
        assert!((mv - 19.644).abs() <= 2.0 * HALF_TABLE_DIGIT_MV, "{mv}");
        for tc in TcType::ALL {
            let (lo, hi) = tc.inverse_range_c();
            let t = 0.5 * (lo + hi);
            let cj = 30.0;
            let back = compensated_c(tc, measured_mv(tc, t, cj).unwrap(), cj).unwrap();
            assert!((back - t).abs() < 1e-6, "type {tc}: {back} vs {t}");
        }
    }

    #[test]
    fn reversed_polarity_is_a_fault_not_a_temperature() {
        // docs/references.md: K at 500 °C wired reversed, 25 °C junction:
        // −19.644 + 1.000 = −18.644 mV, below K's minimum −6.458 mV.
        let measured = -(20.644 - 1.000);
        match compensated_c(TcType::K, measured, 25.0) {
            Err(TcError::EmfOutOfRange { tc, mv, min, .. }) => {
                assert_eq!(tc, TcType::K);
                assert!((mv - -18.644).abs() < 0.001, "{mv}");
                assert!((min - -6.458).abs() <= HALF_TABLE_DIGIT_MV, "{min}");
            }
            other => panic!("expected EmfOutOfRange, got {other:?}"),
        }
    }

    #[test]
    fn out_of_range_is_an_error_never_an_extrapolation() {
        for tc in TcType::ALL {
            let (lo, hi) = tc.range_c();
            for t in [lo - 1e-9, hi + 1e-9, lo - 100.0, hi + 100.0] {
                assert!(
                    matches!(emf_mv(tc, t), Err(TcError::TemperatureOutOfRange { .. })),
                    "type {tc} at {t}"
                );
                assert!(seebeck_mv_per_c(tc, t).is_err(), "type {tc} at {t}");
            }
            assert!(emf_mv(tc, lo).is_ok() && emf_mv(tc, hi).is_ok());
            let (mv_lo, mv_hi) = tc.emf_range_mv();
            for mv in [mv_lo - 1e-9, mv_hi + 1e-9] {
                assert!(
                    matches!(temperature_c(tc, mv), Err(TcError::EmfOutOfRange { .. })),
                    "type {tc} at {mv} mV"
                );
            }
            let (t_lo, t_hi) = tc.inverse_range_c();
            assert!((temperature_c(tc, mv_lo).unwrap() - t_lo).abs() < 1e-9);
            assert!((temperature_c(tc, mv_hi).unwrap() - t_hi).abs() < 1e-9);
        }
    }

    #[test]
    fn type_b_is_not_inverted_where_it_is_double_valued() {
        // NIST SRD 60 type_b.tab: −0.003 mV at 20 °C and 0.000 mV at both
        // 0 °C and 42 °C: one EMF, two temperatures. Refused below 250 °C.
        for mv in [-0.002, 0.0, 0.002, 0.033, 0.29] {
            assert!(
                matches!(
                    temperature_c(TcType::B, mv),
                    Err(TcError::EmfOutOfRange { .. })
                ),
                "{mv} mV"
            );
        }
        // Forward still covers 0…1820 °C, and the dip is real.
        assert!(emf_mv(TcType::B, 21.0).unwrap() < 0.0);
        // 1000 °C → 4.834 mV (docs/references.md, NIST SRD 60 type_b.tab).
        let t = temperature_c(TcType::B, emf_mv(TcType::B, 1000.0).unwrap()).unwrap();
        assert!((t - 1000.0).abs() < 1e-6);
    }

    #[test]
    fn cold_junction_outside_the_range_is_named() {
        // Type B's reference function starts at 0 °C.
        assert!(matches!(
            compensated_c(TcType::B, 5.0, -5.0),
            Err(TcError::ColdJunctionOutOfRange { cj_c, .. }) if cj_c == -5.0
        ));
        assert!(matches!(
            measured_mv(TcType::K, 100.0, 1400.0),
            Err(TcError::ColdJunctionOutOfRange { .. })
        ));
    }

    #[test]
    fn non_finite_input_is_an_error() {
        for tc in TcType::ALL {
            for x in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
                assert!(matches!(emf_mv(tc, x), Err(TcError::NotFinite { .. })));
                assert!(matches!(
                    temperature_c(tc, x),
                    Err(TcError::NotFinite { .. })
                ));
                assert!(matches!(
                    seebeck_mv_per_c(tc, x),
                    Err(TcError::NotFinite { .. })
                ));
                assert!(matches!(
                    compensated_c(tc, x, 20.0),
                    Err(TcError::NotFinite {
                        input: "measured EMF",
                        ..
                    })
                ));
                assert!(matches!(
                    compensated_c(tc, 1.0, x),
                    Err(TcError::NotFinite {
                        input: "cold-junction temperature",
                        ..
                    })
                ));
            }
        }
    }

    #[test]
    fn seebeck_is_the_slope_of_the_nist_table() {
        // Central difference of NIST SRD 60 table values at t ± 1 °C. Each
        // printed value is within 0.0005 mV, so the difference quotient is
        // within 0.0005 mV/°C of the true slope (plus a curvature term of
        // E'''/6 ≈ 1e-7 mV/°C, negligible).
        let cases = [
            (TcType::K, 100.0, 4.055, 4.138),    // type_k.tab 99, 101 °C
            (TcType::K, 500.0, 20.602, 20.687),  // type_k.tab 499, 501 °C
            (TcType::T, -200.0, -5.619, -5.587), // type_t.tab −201, −199 °C
            (TcType::S, 1000.0, 9.576, 9.599),   // type_s.tab 999, 1001 °C
            (TcType::B, 1200.0, 6.776, 6.797),   // type_b.tab 1199, 1201 °C
        ];
        for (tc, t, below, above) in cases {
            let table_slope = (above - below) / 2.0;
            let s = seebeck_mv_per_c(tc, t).unwrap();
            assert!(
                (s - table_slope).abs() <= 0.0005 + 1e-9,
                "type {tc} at {t} °C: {s} vs table {table_slope}"
            );
        }
    }

    #[test]
    fn seebeck_is_the_derivative_of_emf() {
        // Analytic derivative against a central difference of emf_mv
        // (h = 1e-3 °C: truncation ~E'''h²/6 < 1e-12, rounding ~1e-13 mV/°C).
        let h = 1e-3;
        for tc in TcType::ALL {
            let (lo, hi) = tc.range_c();
            for i in 1..200 {
                let t = lo + (hi - lo) * f64::from(i) / 200.0;
                let s = seebeck_mv_per_c(tc, t).unwrap();
                let num = (emf_mv(tc, t + h).unwrap() - emf_mv(tc, t - h).unwrap()) / (2.0 * h);
                assert!((s - num).abs() < 1e-8, "type {tc} at {t} °C: {s} vs {num}");
            }
        }
    }

    #[test]
    fn letters_round_trip() {
        for tc in TcType::ALL {
            let upper = tc.letter().to_string();
            let lower = tc.letter().to_ascii_lowercase().to_string();
            assert_eq!(TcType::from_letter(&upper), Some(tc));
            assert_eq!(TcType::from_letter(&lower), Some(tc));
            assert_eq!(tc.to_string(), upper);
        }
        for bad in ["", "KK", "X", " K", "type K"] {
            assert_eq!(TcType::from_letter(bad), None, "{bad:?}");
        }
    }
}
