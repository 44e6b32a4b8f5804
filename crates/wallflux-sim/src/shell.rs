//! The simulator's own model of the heat the shell's outer surface loses:
//! free (or mixed) convection to the air plus radiation to the
//! surroundings, `q = h_c (T_s − T_∞) + h_r (T_s − T_sur)`. Independent of the
//! core's surface model: other air properties, its own correlations.
//!
//! # Air (dry, 1 atm), at the film temperature `T_f = (T_s + T_∞)/2`
//! - Viscosity and conductivity by Sutherland's law, with White's constants
//!   (F. M. White, *Viscous Fluid Flow*, Tables 1-2 and 1-3, from memory):
//!   `μ = 1.716e-5 (T/273.15)^1.5 (273.15 + 110.4)/(T + 110.4)` Pa·s,
//!   `k = 0.0241 (T/273.15)^1.5 (273.15 + 194)/(T + 194)` W/(m·K).
//! - Specific heat `c_p = 1002.5 + 275e-6 (T − 200)²` J/(kg·K), a fit of
//!   tabulated air over 250…1050 K (from memory; within 0.5 % of Incropera's
//!   Table A.4 at 300 and 400 K).
//! - Ideal gas: `ρ = p/(R T)`, `R = 287.05` J/(kg·K), `β = 1/T_f`.
//!
//! # Convection (Incropera, DeWitt, Bergman & Lavine, *Fundamentals of Heat
//! and Mass Transfer*, 6th ed., chapters 7 and 9; equation numbers from
//! memory)
//! - Vertical wall: Churchill–Chu over the whole range (eq. 9.26), length =
//!   height.
//! - Upper side of a hot plate, or lower side of a cold one: the larger of
//!   `0.54 Ra^¼` and `0.15 Ra^⅓` (eqs. 9.30, 9.31; the larger of the two makes
//!   them meet continuously near Ra = 4.7e6 instead of switching at 1e7).
//! - Lower side of a hot plate, or upper side of a cold one: `0.52 Ra^⅕`
//!   (eq. 9.32).
//! - With wind along the surface, the flat plate in forced flow: the larger
//!   of laminar `0.664 Re^½ Pr^⅓` (eq. 7.30) and mixed laminar–turbulent
//!   `(0.037 Re^⅘ − 871) Pr^⅓` (eq. 7.38), combined with the free convection
//!   as `Nu³ = Nu_F³ + Nu_N³` (eq. 9.64, n = 3).
//!
//! # Radiation
//! A grey surface in large surroundings: `h_r = ε σ (T_s + T_sur)(T_s² +
//! T_sur²)` in kelvin, σ = 5.670374419e-8 W/(m²·K⁴) (CODATA 2018).

use wallflux_core::physics::surface::{Orientation, SurfaceParams};

/// 0 °C in kelvin.
pub const ZERO_C_K: f64 = 273.15;
/// Stefan–Boltzmann constant, W/(m²·K⁴) (CODATA 2018).
pub const SIGMA_W_M2K4: f64 = 5.670_374_419e-8;
/// Standard gravity, m/s².
const G_M_S2: f64 = 9.806_65;
/// Standard atmosphere, Pa.
const P_ATM_PA: f64 = 101_325.0;
/// Specific gas constant of dry air, J/(kg·K).
const R_AIR_J_KGK: f64 = 287.05;

/// The shell's loss at one surface temperature.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ShellLoss {
    /// Heat flux leaving the surface, W/m² (negative when it gains).
    pub flux_w_m2: f64,
    /// Convection coefficient, W/(m²·K).
    pub h_convection_w_m2k: f64,
    /// Linearised radiation coefficient, W/(m²·K).
    pub h_radiation_w_m2k: f64,
}

/// Properties of air at `t_k`.
#[derive(Clone, Copy, Debug)]
struct Air {
    /// Thermal conductivity, W/(m·K).
    k: f64,
    /// Kinematic viscosity, m²/s.
    nu: f64,
    /// Thermal diffusivity, m²/s.
    alpha: f64,
    /// Prandtl number.
    pr: f64,
}

fn air(t_k: f64) -> Air {
    let r = t_k / ZERO_C_K;
    let mu = 1.716e-5 * r.powf(1.5) * (ZERO_C_K + 110.4) / (t_k + 110.4);
    let k = 0.0241 * r.powf(1.5) * (ZERO_C_K + 194.0) / (t_k + 194.0);
    let cp = 1002.5 + 275e-6 * (t_k - 200.0).powi(2);
    let rho = P_ATM_PA / (R_AIR_J_KGK * t_k);
    Air {
        k,
        nu: mu / rho,
        alpha: k / (rho * cp),
        pr: mu * cp / k,
    }
}

/// Churchill–Chu, vertical plate, all Ra.
fn nu_vertical(ra: f64, pr: f64) -> f64 {
    let f = (1.0 + (0.492 / pr).powf(9.0 / 16.0)).powf(8.0 / 27.0);
    (0.825 + 0.387 * ra.powf(1.0 / 6.0) / f).powi(2)
}

/// Upper side of a hot plate (or lower side of a cold one).
fn nu_unstable(ra: f64) -> f64 {
    (0.54 * ra.powf(0.25)).max(0.15 * ra.cbrt())
}

/// Lower side of a hot plate (or upper side of a cold one).
fn nu_stable(ra: f64) -> f64 {
    0.52 * ra.powf(0.2)
}

/// Flat plate in forced flow, average over the length.
fn nu_forced(re: f64, pr: f64) -> f64 {
    let laminar = 0.664 * re.sqrt() * pr.cbrt();
    let mixed = (0.037 * re.powf(0.8) - 871.0) * pr.cbrt();
    laminar.max(mixed)
}

/// Convection coefficient of the surface at `t_s_c`, W/(m²·K).
fn h_convection(t_s_c: f64, p: &SurfaceParams) -> f64 {
    let dt = t_s_c - p.ambient_c;
    let t_f = 0.5 * (t_s_c + p.ambient_c) + ZERO_C_K;
    let a = air(t_f);
    let l = p.length_m;
    let ra = G_M_S2 * dt.abs() * l.powi(3) / (t_f * a.nu * a.alpha);
    let hot = dt > 0.0;
    let nu_free = match p.orientation {
        Orientation::Vertical => nu_vertical(ra, a.pr),
        Orientation::Roof if hot => nu_unstable(ra),
        Orientation::Floor if !hot => nu_unstable(ra),
        Orientation::Roof | Orientation::Floor => nu_stable(ra),
    };
    let nu = match p.wind_m_s {
        Some(v) if v > 0.0 => (nu_forced(v * l / a.nu, a.pr).powi(3) + nu_free.powi(3)).cbrt(),
        _ => nu_free,
    };
    nu * a.k / l
}

/// The loss of a surface at `t_s_c` °C with parameters `p` (checked by
/// [`SurfaceParams::validate`]).
pub fn shell_loss(t_s_c: f64, p: &SurfaceParams) -> ShellLoss {
    let h_c = h_convection(t_s_c, p);
    let (ts, tsur) = (t_s_c + ZERO_C_K, p.surroundings_c + ZERO_C_K);
    let h_r = p.emissivity * SIGMA_W_M2K4 * (ts + tsur) * (ts * ts + tsur * tsur);
    ShellLoss {
        flux_w_m2: h_c * (t_s_c - p.ambient_c) + h_r * (t_s_c - p.surroundings_c),
        h_convection_w_m2k: h_c,
        h_radiation_w_m2k: h_r,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn vertical(length_m: f64, ambient_c: f64) -> SurfaceParams {
        SurfaceParams {
            orientation: Orientation::Vertical,
            length_m,
            emissivity: 0.0,
            ambient_c,
            surroundings_c: ambient_c,
            wind_m_s: None,
        }
    }

    #[test]
    fn incropera_example_9_2_glass_fire_screen() {
        // Incropera et al., 6th ed., Example 9.2 (values from memory): a
        // vertical glass screen 0.71 m high and 1.02 m wide at 232 °C in a
        // room at 23 °C; at T_f = 400 K the book finds Ra_L = 1.813e9,
        // Nu_L = 147, h = 7.0 W/(m²·K) and q = 1060 W by convection. Our air
        // differs from its Table A.4 by up to 2 % (ν, α), which moves Ra by
        // about 4 % and Nu (∝ Ra^⅓ here) by about 1.3 %: 3 % is allowed.
        let p = vertical(0.71, 23.0);
        let a = air(400.0);
        let ra = G_M_S2 * 209.0 * 0.71_f64.powi(3) / (400.0 * a.nu * a.alpha);
        assert!((ra / 1.813e9 - 1.0).abs() < 0.06, "Ra {ra}");
        assert!((nu_vertical(ra, a.pr) / 147.0 - 1.0).abs() < 0.03);
        let loss = shell_loss(232.0, &p);
        assert!(
            (loss.h_convection_w_m2k / 7.0 - 1.0).abs() < 0.03,
            "{loss:?}"
        );
        let q_w = loss.flux_w_m2 * 0.71 * 1.02;
        assert!((q_w / 1060.0 - 1.0).abs() < 0.03, "q {q_w} W");
        assert_eq!(loss.h_radiation_w_m2k, 0.0);
    }

    #[test]
    fn air_at_300_k_against_the_handbook_table() {
        // Incropera Table A.4 at 300 K (from memory): k 26.3e-3 W/(m·K),
        // ν 15.89e-6 m²/s, Pr 0.707. Sutherland's law and the ideal gas
        // agree to 2 % (the table's density, 1.1614 kg/m³, is 1.3 % below
        // p/RT = 1.1766, which is most of the gap in ν).
        let a = air(300.0);
        assert!((a.k / 26.3e-3 - 1.0).abs() < 0.02, "{a:?}");
        assert!((a.nu / 15.89e-6 - 1.0).abs() < 0.02, "{a:?}");
        assert!((a.pr / 0.707 - 1.0).abs() < 0.02, "{a:?}");
    }

    #[test]
    fn radiation_is_stefan_boltzmann() {
        // A black surface at 100 °C in surroundings at 20 °C, the air at the
        // surface temperature (convection carries nothing, though Churchill–
        // Chu keeps its conduction limit Nu = 0.825² as Ra → 0):
        // σ (373.15⁴ − 293.15⁴) = 680.7 W/m² by hand.
        let p = SurfaceParams {
            emissivity: 1.0,
            ambient_c: 100.0,
            surroundings_c: 20.0,
            ..vertical(1.0, 100.0)
        };
        let loss = shell_loss(100.0, &p);
        let want = SIGMA_W_M2K4 * (373.15_f64.powi(4) - 293.15_f64.powi(4));
        assert!((want - 680.7).abs() < 0.1, "{want}");
        assert!((loss.flux_w_m2 - want).abs() < 1e-9, "{loss:?}");
        let nu0 = loss.h_convection_w_m2k * 1.0 / air(373.15).k;
        assert!((nu0 - 0.825 * 0.825).abs() < 1e-12, "{loss:?}");
    }

    #[test]
    fn horizontal_plates_and_wind() {
        // A hot roof loses more than a hot floor of the same size (unstable
        // against stable layering); the reverse for a cold one; and wind
        // adds to free convection.
        let at = |orientation, wind_m_s| SurfaceParams {
            orientation,
            wind_m_s,
            ..vertical(0.5, 25.0)
        };
        let h = |p: &SurfaceParams, t| shell_loss(t, p).h_convection_w_m2k;
        let (roof, floor) = (at(Orientation::Roof, None), at(Orientation::Floor, None));
        assert!(h(&roof, 120.0) > 1.5 * h(&floor, 120.0));
        assert!(h(&floor, 5.0) > 1.5 * h(&roof, 5.0));
        // A hot roof at Ra near 1e8: Nu = 0.15 Ra^⅓ by hand.
        let a = air(0.5 * (120.0 + 25.0) + ZERO_C_K);
        let t_f = 0.5 * (120.0 + 25.0) + ZERO_C_K;
        let ra = G_M_S2 * 95.0 * 0.125 / (t_f * a.nu * a.alpha);
        assert!((h(&roof, 120.0) - 0.15 * ra.cbrt() * a.k / 0.5).abs() < 1e-9);
        let windy = at(Orientation::Vertical, Some(3.0));
        let still = at(Orientation::Vertical, None);
        assert!(h(&windy, 120.0) > h(&still, 120.0));
        // 3 m/s over 0.5 m (Re ≈ 6.6e4, laminar) dominates: within 15 % of
        // the forced value alone.
        let forced = nu_forced(3.0 * 0.5 / a.nu, a.pr) * a.k / 0.5;
        assert!((h(&windy, 120.0) / forced - 1.0).abs() < 0.15);
    }
}
