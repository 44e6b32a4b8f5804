//! The estimator's initial profile: piecewise steady and layered, through
//! the readings.
//!
//! A steady layered wall without sources carries one flux `q` through every
//! layer. In each layer the Kirchhoff potential `Θ(T) = ∫k dT` is linear in
//! `x`, so from a point `(x_a, T_a)` the temperature at `x_b` in the same
//! layer solves `∫_{T_b}^{T_a} k dT = q (x_b − x_a)` (Incropera §3.2,
//! variable conductivity; the step shared with the layered model,
//! [`crate::physics::kirchhoff`]); marching layer by layer gives the profile
//! of any flux from any point ([`Stack::march`]). Unlike the layered fit's
//! march this one goes from any depth in either direction and carries no
//! Jacobian.
//!
//! The initial profile goes through the readings (averaged where probes
//! share a depth), each span between adjacent probe depths being the steady
//! layered profile that joins them:
//!
//! - between two probe depths: the flux that joins their readings;
//! - hot side of the shallowest probe: the flux of the first span, carried on
//!   to the hot face (with one depth only: the shell-balance flux);
//! - shell side of the deepest probe: the flux the shell loses at steady
//!   state from there ([`shell_balance_flux`]).
//!
//! On a steady wall this is the exact steady profile (one flux everywhere).
//! On a wall heating up it is not steady, but it still passes through every
//! reading and keeps the unmeasured shell between the deepest reading and
//! the air; a single steady fit would miss the readings by a hundred kelvin
//! mid-heat-up, and extrapolating its (large) flux to the shell can put the
//! shell below the air. The filter's prior covariance allows for the rest.

use heapless::Vec as HVec;

use super::model::{temperature_ok, ShellBoundary};
use super::{MAX_NODES, MAX_READINGS};
use crate::bounded::{Full, PushWithin};
use crate::physics::kirchhoff::Conductivity;
use crate::physics::material::Material;
use crate::physics::profile::{ProbeSample, DEPTH_TOLERANCE_M};

/// Most bisection steps on a flux (more than f64 needs).
const MAX_BISECTIONS: usize = 200;

/// The checked conductivity of a layer's material (`None` if invalid).
fn conductivity(m: &Material) -> Option<Conductivity<'_>> {
    Conductivity::new(&m.conductivity_w_mk).ok()
}

/// The layers as the steady profile needs them.
pub(super) struct Stack<'a> {
    pub materials: &'a [Material],
    /// Depth of each layer's shell-side face, m (rising; the last is L).
    pub ends_m: &'a [f64],
    /// Contact resistance on each layer's cold side, m²K/W.
    pub contacts_m2k_w: &'a [f64],
}

impl Stack<'_> {
    fn thickness_m(&self) -> f64 {
        self.ends_m.last().copied().unwrap_or(0.0)
    }

    fn start_of(&self, i: usize) -> f64 {
        match i.checked_sub(1) {
            Some(j) => self.ends_m.get(j).copied().unwrap_or(0.0),
            None => 0.0,
        }
    }

    /// Steady temperature at `to_m` with flux `q` through a point at
    /// `from_m` at `from_c` (either direction), or `None` if it falls to
    /// absolute zero, is not finite or a conductivity is invalid. A contact resistance `R` on a
    /// layer's cold side drops the temperature by `q R` where the path
    /// crosses it (Incropera §3.1.4). A point exactly on an interface is on
    /// its hot side, except `to_m` when `to_cold_side` is set.
    pub fn march(
        &self,
        from_m: f64,
        from_c: f64,
        q_w_m2: f64,
        to_m: f64,
        to_cold_side: bool,
    ) -> Option<f64> {
        let layers = self.materials.len().min(self.ends_m.len());
        if layers == 0 {
            return None;
        }
        let contact = |i: usize| self.contacts_m2k_w.get(i).copied().unwrap_or(0.0);
        let mut x = from_m;
        let mut t = from_c;
        // The layer holding the start (the hot one at an interface).
        let mut i = self.ends_m[..layers]
            .iter()
            .position(|&e| e >= from_m)
            .unwrap_or(layers - 1);
        // One layer's Kirchhoff step from `x` to `x_next`; `None` if the
        // conductivity is invalid or the step meets a non-finite number.
        let piece = |i: usize, x_next: f64, x: &mut f64, t: &mut f64| {
            *t = conductivity(&self.materials[i])?
                .step(*t, q_w_m2, x_next - *x)
                .ok()?;
            *x = x_next;
            Some(())
        };
        if to_m >= from_m {
            loop {
                let end = self.ends_m[i];
                piece(i, to_m.min(end), &mut x, &mut t)?;
                if to_m < end || i + 1 == layers || (to_m == end && !to_cold_side) {
                    break;
                }
                t -= q_w_m2 * contact(i);
                i += 1;
                if to_m == end {
                    break;
                }
            }
        } else {
            loop {
                let start = self.start_of(i);
                piece(i, to_m.max(start), &mut x, &mut t)?;
                if to_m > start || i == 0 || (to_m == start && to_cold_side) {
                    break;
                }
                t += q_w_m2 * contact(i - 1);
                i -= 1;
                if to_m == start {
                    break;
                }
            }
        }
        temperature_ok(t).then_some(t)
    }

    /// The steady flux that joins `(a_m, a_c)` to `(b_m, b_c)`, `a_m < b_m`:
    /// bisection on `q` (the marched temperature falls as `q` rises), within
    /// `ΔT/R_max … ΔT/R_min`, the resistances of the span with every layer
    /// at its lowest and highest conductivity.
    pub fn joining_flux(&self, a_m: f64, a_c: f64, b_m: f64, b_c: f64) -> Option<f64> {
        let (mut r_min, mut r_max) = (0.0, 0.0);
        for (i, (m, &end)) in self.materials.iter().zip(self.ends_m).enumerate() {
            let overlap = end.min(b_m) - self.start_of(i).max(a_m);
            if overlap > 0.0 {
                let (k_min, k_max) = conductivity(m)?.bounds();
                r_min += overlap / k_max;
                r_max += overlap / k_min;
            }
            // A contact the span crosses (points on an interface are on its
            // hot side).
            if a_m <= end && end < b_m {
                let r = self.contacts_m2k_w.get(i).copied().unwrap_or(0.0);
                r_min += r;
                r_max += r;
            }
        }
        let dt = a_c - b_c;
        let (x, y) = (dt / r_max, dt / r_min);
        let (mut q_lo, mut q_hi) = (x.min(y), x.max(y));
        if !(q_lo.is_finite() && q_hi.is_finite()) {
            return None;
        }
        for _ in 0..MAX_BISECTIONS {
            let mid = 0.5 * (q_lo + q_hi);
            if !(mid > q_lo && mid < q_hi) {
                break;
            }
            // Too large a flux ends too cold (or below absolute zero).
            match self.march(a_m, a_c, mid, b_m, false) {
                Some(t) if t >= b_c => q_lo = mid,
                _ => q_hi = mid,
            }
        }
        Some(0.5 * (q_lo + q_hi))
    }
}

/// The steady flux from a point at `depth_m` at `temp_c` to the shell that
/// the shell loses: `q = loss(T(L; q))`, by bisection (the residual
/// `q − loss(T(L; q))` rises with `q`; the root's shell temperature lies
/// between `temp_c` and the air and surroundings, which brackets `q`).
pub(super) fn shell_balance_flux(
    stack: &Stack<'_>,
    depth_m: f64,
    temp_c: f64,
    shell: &ShellBoundary,
) -> Option<f64> {
    let l = stack.thickness_m();
    let surroundings = match shell {
        ShellBoundary::Surface(p) => p.surroundings_c,
        ShellBoundary::Convection { ambient_c, .. } => *ambient_c,
    };
    let lo_c = temp_c.min(shell.ambient_c()).min(surroundings);
    let hi_c = temp_c.max(shell.ambient_c()).max(surroundings);
    let (mut q_lo, mut q_hi) = (shell.flux_w_m2(lo_c), shell.flux_w_m2(hi_c));
    if !(q_lo.is_finite() && q_hi.is_finite()) {
        return None;
    }
    for _ in 0..MAX_BISECTIONS {
        let mid = 0.5 * (q_lo + q_hi);
        if !(mid > q_lo && mid < q_hi) {
            break;
        }
        // A trial flux whose shell falls below absolute zero is far too
        // large: a positive residual.
        let too_large = match stack.march(depth_m, temp_c, mid, l, false) {
            Some(t_shell) => mid > shell.flux_w_m2(t_shell),
            None => true,
        };
        if too_large {
            q_hi = mid;
        } else {
            q_lo = mid;
        }
    }
    Some(0.5 * (q_lo + q_hi))
}

/// Readings averaged per depth (weights `1/σ²`; depths within
/// [`DEPTH_TOLERANCE_M`] are one), sorted by depth: `(depth_m, temp_c)`.
/// More than [`MAX_READINGS`] readings are refused, never cut short.
pub(super) fn readings_by_depth<I>(samples: I) -> Result<HVec<(f64, f64), MAX_NODES>, Full>
where
    I: Iterator<Item = ProbeSample>,
{
    let mut sorted: HVec<ProbeSample, MAX_READINGS> = HVec::new();
    for s in samples {
        sorted.push_within(s, "readings in one step")?;
    }
    sorted.sort_unstable_by(|a, b| a.depth_m.total_cmp(&b.depth_m));
    let mut out: HVec<(f64, f64), MAX_NODES> = HVec::new();
    let mut group = (0.0, 0.0, 0.0, f64::NEG_INFINITY); // Σw, Σw d, Σw T, first depth
    for s in sorted.iter() {
        let w = 1.0 / (s.sigma_c * s.sigma_c);
        if s.depth_m - group.3 > DEPTH_TOLERANCE_M && group.0 > 0.0 {
            out.push_within((group.1 / group.0, group.2 / group.0), "reading depths")?;
            group = (0.0, 0.0, 0.0, s.depth_m);
        }
        if group.0 == 0.0 {
            group.3 = s.depth_m;
        }
        group.0 += w;
        group.1 += w * s.depth_m;
        group.2 += w * s.temp_c;
    }
    if group.0 > 0.0 {
        out.push_within((group.1 / group.0, group.2 / group.0), "reading depths")?;
    }
    Ok(out)
}

/// Fills `out` with the initial profile at `depths_m` through `points`
/// (from [`readings_by_depth`]; see the module docs). `false` if there are
/// no points or some temperature cannot be found.
pub(super) fn initial_profile(
    stack: &Stack<'_>,
    points: &HVec<(f64, f64), MAX_NODES>,
    shell: &ShellBoundary,
    depths_m: &[f64],
    out: &mut [f64],
) -> bool {
    let (Some(&first), Some(&last)) = (points.first(), points.last()) else {
        return false;
    };
    let Some(q_shell) = shell_balance_flux(stack, last.0, last.1, shell) else {
        return false;
    };
    let q_hot = match points.get(1) {
        Some(&second) => stack.joining_flux(first.0, first.1, second.0, second.1),
        None => Some(q_shell),
    };
    let Some(q_hot) = q_hot else {
        return false;
    };
    // Flux of each span between adjacent points. At most MAX_NODES points
    // (their type) make at most MAX_NODES − 1 spans: the zip fills a slot
    // for every span and stops at the last one, never at the array's end.
    let mut span_q = [0.0; MAX_NODES];
    for (q, w) in span_q.iter_mut().zip(points.windows(2)) {
        match stack.joining_flux(w[0].0, w[0].1, w[1].0, w[1].1) {
            Some(flux) => *q = flux,
            None => return false,
        }
    }
    let span_q = &span_q[..points.len() - 1];
    for (j, (&x, t)) in depths_m.iter().zip(out.iter_mut()).enumerate() {
        // The second of two nodes at one depth is a contact's cold side.
        let cold = j > 0 && depths_m[j - 1] == x;
        let value = if x <= first.0 {
            stack.march(first.0, first.1, q_hot, x, cold)
        } else if x >= last.0 {
            stack.march(last.0, last.1, q_shell, x, cold)
        } else {
            // The span [a, b] that holds x; points rise strictly in depth.
            let i = points.partition_point(|p| p.0 <= x).saturating_sub(1);
            match (points.get(i), span_q.get(i)) {
                (Some(&a), Some(&q)) => stack.march(a.0, a.1, q, x, cold),
                _ => None,
            }
        };
        match value {
            Some(v) => *t = v,
            None => return false,
        }
    }
    true
}
