//! The complete uncertainty of a zone's numbers (GUM, JCGM 100:2008, §5:
//! the law of propagation of uncertainty, first order): every input's
//! standard uncertainty times the sensitivity of the number to it, combined
//! as a root sum of squares, and kept apart by source so that the budget
//! shows which input dominates.
//!
//! Inputs and their correlations:
//! - each probe's reading, its standard uncertainty (thermocouple
//!   tolerance, calibration), independent between probes;
//! - each probe's depth, `depth_sigma_m`, independent between probes;
//! - each layer's conductivity, a relative standard uncertainty applied as
//!   one factor on the whole `k(T)` of the layer (fully correlated within
//!   the layer: a data-sheet curve that is off is off at every
//!   temperature), independent between layers;
//! - for the transient model, each layer's `ρ c_p` the same way
//!   (docs/transient-model.md).
//!
//! Sensitivities of a steady model ([`steady_budget`]) are central
//! differences of the same model function that produced the numbers, with
//! steps of one standard uncertainty (a secant over ±1 σ, which also
//! follows a mild curvature). The layered wall (a Gauss–Newton fit, the
//! costly one) uses it for its conductivities only and steps readings and
//! depths through its covariance instead (`monitor::wall::Wall::budget`). Pure, no IO, no heap: every buffer is a fixed
//! array.

use heapless::Vec as HVec;

use crate::physics::layered::{MAX_LAYERS, MAX_PROBES};
use crate::physics::profile::ProbeSample;

/// Most numbers one model function returns: hot face, shell, both fluxes,
/// the thermal resistance and the interfaces.
pub const MAX_OUTPUTS: usize = 5 + MAX_LAYERS;

/// Index of each number in a model function's outputs.
pub const OUT_HOT_FACE: usize = 0;
pub const OUT_SHELL: usize = 1;
pub const OUT_FLUX_HOT_FACE: usize = 2;
pub const OUT_FLUX_SHELL: usize = 3;
/// The thermal resistance (layered; NaN where the model has none).
pub const OUT_RESISTANCE: usize = 4;
/// The first interface temperature (layered); more follow.
pub const OUT_INTERFACE: usize = 5;

/// Outputs of the transient budget: hot face, shell and both fluxes (the
/// model has no single thermal resistance, and its interfaces are not
/// budgeted).
pub const TRANSIENT_OUTPUTS: usize = OUT_FLUX_SHELL + 1;

/// Independent sources of a budget: thermocouple, depth, conductivity,
/// heat capacity ([`Budget::shares_pct`]).
pub const SOURCES: usize = 4;

/// A model's outputs for one set of inputs, by the `OUT_*` indices.
pub type Outputs = [f64; MAX_OUTPUTS];

/// The standard uncertainty of each output, by source (all 1 σ, in the
/// output's unit).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Budget {
    /// How many outputs are filled.
    pub n: usize,
    /// From the probes' readings.
    pub thermocouple: Outputs,
    /// From the probes' depths.
    pub depth: Outputs,
    /// From the layers' conductivities.
    pub conductivity: Outputs,
    /// From the layers' heat capacities (transient model; 0 otherwise).
    pub heat_capacity: Outputs,
}

impl Budget {
    /// An empty budget over `n` outputs.
    pub fn zero(n: usize) -> Self {
        Budget {
            n,
            thermocouple: [0.0; MAX_OUTPUTS],
            depth: [0.0; MAX_OUTPUTS],
            conductivity: [0.0; MAX_OUTPUTS],
            heat_capacity: [0.0; MAX_OUTPUTS],
        }
    }

    /// Combined standard uncertainty of output `i` (root sum of squares of
    /// the independent sources).
    pub fn total(&self, i: usize) -> f64 {
        let sq = |a: &Outputs| a.get(i).map_or(0.0, |v| v * v);
        (sq(&self.thermocouple)
            + sq(&self.depth)
            + sq(&self.conductivity)
            + sq(&self.heat_capacity))
        .sqrt()
    }

    /// Each source's share of the variance of output `i`, %
    /// (thermocouple, depth, conductivity, heat capacity; they sum to 100).
    /// None when the combined variance is zero or not finite.
    pub fn shares_pct(&self, i: usize) -> Option<[f64; SOURCES]> {
        let t = self.total(i);
        let var = t * t;
        if !(var.is_finite() && var > 0.0) {
            return None;
        }
        let s = |a: &Outputs| a.get(i).map_or(0.0, |v| v * v) / var * 100.0;
        Some([
            s(&self.thermocouple),
            s(&self.depth),
            s(&self.conductivity),
            s(&self.heat_capacity),
        ])
    }
}

/// The inputs of a steady model and their standard uncertainties.
#[derive(Debug, Clone, Copy)]
pub struct SteadyInputs<'s> {
    /// The probe readings the model was fitted to (each with its σ).
    pub samples: &'s [ProbeSample],
    /// Each sample's depth standard uncertainty, m (same order).
    pub depth_sigma_m: &'s [f64],
    /// Each layer's relative conductivity standard uncertainty (0.15 for
    /// 15 %), hot face first.
    pub conductivity_rel: &'s [f64],
    /// Wall thickness, m (a depth step never leaves the wall).
    pub thickness_m: f64,
    /// Step the readings too (false: their part is known otherwise and
    /// left at 0).
    pub readings: bool,
    /// The fitted profile's slope dT/dx at each sample, °C/m, if known
    /// (else empty): a depth step δx then counts as the reading step
    /// −T'·δx it is equivalent to in the fit's residual (first order), so
    /// each probe costs two model runs instead of four.
    pub slope_c_per_m: &'s [f64],
    /// Add the mixed second-order terms of each pair of layers (four more
    /// model runs per pair): for a strongly curved number such as a wear
    /// estimate.
    pub mixed_terms: bool,
}

/// The budget of a steady model by central differences.
///
/// `model(samples, k_scale, out)` must evaluate the same fit that produced
/// the published numbers with the probes `samples` and every layer's
/// conductivity multiplied by `k_scale[layer]`, write the outputs by the
/// `OUT_*` indices and return how many it filled (None: the model failed).
/// For each probe the reading is stepped by ±σ and the depth by ±its σ
/// (kept inside the wall: one-sided inward at a face); for each layer the
/// conductivity factor by 1 ± u. A step the model cannot evaluate leaves
/// that input out and makes the budget None, never a silent zero.
pub fn steady_budget<F>(inputs: &SteadyInputs<'_>, mut model: F) -> Option<Budget>
where
    F: FnMut(&[ProbeSample], &[f64; MAX_LAYERS], &mut Outputs) -> Option<usize>,
{
    let n_s = inputs.samples.len();
    if inputs.depth_sigma_m.len() != n_s {
        return None;
    }
    let ones = [1.0; MAX_LAYERS];
    // More than MAX_PROBES samples: no budget at all (the steady fits refuse
    // them too), never a budget of the first MAX_PROBES.
    let mut work: HVec<ProbeSample, MAX_PROBES> = HVec::from_slice(inputs.samples).ok()?;
    let mut nominal = [0.0; MAX_OUTPUTS];
    let n = model(&work, &ones, &mut nominal)?.min(MAX_OUTPUTS);
    let mut budget = Budget::zero(n);
    let mut plus = [0.0; MAX_OUTPUTS];
    let mut minus = [0.0; MAX_OUTPUTS];

    // Accumulates the variance of one input stepped by ±u: the first-order
    // term (`scale` × (plus − minus))², and for a symmetric ±u step
    // (`scale` = ½) the second-order term of the GUM (JCGM 100:2008,
    // 5.1.2, note: ½ (∂²f/∂x²)² u⁴ = 2 c² with c = (plus + minus)/2 − f),
    // which a strongly curved dependence (a conductivity known to 15 %)
    // needs.
    let add = |acc: &mut Outputs, plus: &Outputs, minus: &Outputs, scale: f64| {
        for i in 0..n {
            let d = (plus[i] - minus[i]) * scale;
            if plus[i].is_nan() && minus[i].is_nan() {
                continue; // an output this model does not have
            }
            let c = if scale == 0.5 {
                0.5 * (plus[i] + minus[i]) - nominal[i]
            } else {
                0.0
            };
            acc[i] += d * d + 2.0 * c * c;
        }
    };

    for j in 0..n_s {
        // Reading: central difference over ±σ; its contribution is
        // σ · (f(+σ) − f(−σ)) / (2σ).
        let sd = inputs.samples[j].sigma_c;
        if inputs.readings && sd > 0.0 {
            work[j].temp_c = inputs.samples[j].temp_c + sd;
            model(&work, &ones, &mut plus)?;
            work[j].temp_c = inputs.samples[j].temp_c - sd;
            model(&work, &ones, &mut minus)?;
            work[j].temp_c = inputs.samples[j].temp_c;
            add(&mut budget.thermocouple, &plus, &minus, 0.5);
            if let Some(&g) = inputs.slope_c_per_m.get(j) {
                let ratio = (g * inputs.depth_sigma_m[j] / sd).abs();
                for i in 0..n {
                    let d = 0.5 * (plus[i] - minus[i]) * ratio;
                    if d.is_finite() {
                        budget.depth[i] += d * d;
                    }
                }
            }
        }
        // Depth: ±σ_x inside the wall, else one-sided inward.
        let sx = inputs.depth_sigma_m[j];
        if sx > 0.0 && inputs.slope_c_per_m.is_empty() {
            let x = inputs.samples[j].depth_m;
            let room = x.min(inputs.thickness_m - x).max(0.0);
            if room >= sx {
                work[j].depth_m = x + sx;
                model(&work, &ones, &mut plus)?;
                work[j].depth_m = x - sx;
                model(&work, &ones, &mut minus)?;
                add(&mut budget.depth, &plus, &minus, 0.5);
            } else if room > 1e-4 {
                // Close to a face: the derivative over the room there is.
                work[j].depth_m = x + room;
                model(&work, &ones, &mut plus)?;
                work[j].depth_m = x - room;
                model(&work, &ones, &mut minus)?;
                add(&mut budget.depth, &plus, &minus, 0.5 * sx / room);
            } else {
                let inward = if x < 0.5 * inputs.thickness_m {
                    sx
                } else {
                    -sx
                };
                work[j].depth_m = x + inward;
                model(&work, &ones, &mut plus)?;
                add(&mut budget.depth, &plus, &nominal, 1.0);
            }
            work[j].depth_m = x;
        }
    }
    let mut scale = ones;
    for (layer, &u) in inputs.conductivity_rel.iter().enumerate().take(MAX_LAYERS) {
        if u > 0.0 {
            scale[layer] = 1.0 + u;
            model(&work, &scale, &mut plus)?;
            scale[layer] = 1.0 - u;
            model(&work, &scale, &mut minus)?;
            scale[layer] = 1.0;
            add(&mut budget.conductivity, &plus, &minus, 0.5);
        }
    }
    // Mixed second-order terms between layers (JCGM 100:2008, 5.1.2,
    // note: (∂²f/∂k_i∂k_j)² u_i² u_j² for each pair): a wear estimate
    // depends on the product of the layers' conductivities.
    let n_layers = if inputs.mixed_terms {
        inputs.conductivity_rel.len().min(MAX_LAYERS)
    } else {
        0
    };
    for a in 0..n_layers {
        for b in (a + 1)..n_layers {
            let (ua, ub) = (inputs.conductivity_rel[a], inputs.conductivity_rel[b]);
            if !(ua > 0.0 && ub > 0.0) {
                continue;
            }
            let mut corner = |sa: f64, sb: f64, out: &mut Outputs| {
                scale[a] = 1.0 + sa * ua;
                scale[b] = 1.0 + sb * ub;
                let r = model(&work, &scale, out);
                scale[a] = 1.0;
                scale[b] = 1.0;
                r
            };
            let (mut pp, mut pm, mut mp, mut mm) = (
                [0.0; MAX_OUTPUTS],
                [0.0; MAX_OUTPUTS],
                [0.0; MAX_OUTPUTS],
                [0.0; MAX_OUTPUTS],
            );
            corner(1.0, 1.0, &mut pp)?;
            corner(1.0, -1.0, &mut pm)?;
            corner(-1.0, 1.0, &mut mp)?;
            corner(-1.0, -1.0, &mut mm)?;
            for i in 0..n {
                let m = 0.25 * (pp[i] - pm[i] - mp[i] + mm[i]);
                if m.is_finite() {
                    budget.conductivity[i] += m * m;
                }
            }
        }
    }
    for acc in [
        &mut budget.thermocouple,
        &mut budget.depth,
        &mut budget.conductivity,
    ] {
        for v in acc.iter_mut() {
            *v = v.sqrt();
        }
    }
    let finite = (0..n).all(|i| budget.total(i).is_finite() || nominal[i].is_nan());
    finite.then_some(budget)
}

/// One layer of a transient wall with its property uncertainties.
#[derive(Debug, Clone, Copy)]
pub struct TransientLayerInput<'a> {
    pub material: &'a crate::physics::material::Material,
    pub thickness_m: f64,
    /// Relative standard uncertainty of k (0.15 for 15 %).
    pub conductivity_rel: f64,
    /// Relative standard uncertainty of ρ c_p.
    pub heat_capacity_rel: f64,
}

/// The transient model's estimate and what the budget needs of it.
#[derive(Debug, Clone, Copy)]
pub struct TransientInputs<'a> {
    pub layers: &'a [TransientLayerInput<'a>],
    /// The estimated profile: `(depth_m, °C, ∂T/∂t in °C/s)` by depth.
    pub nodes: &'a [(f64, f64, f64)],
    /// The probes used: `(depth_m, depth σ in m)`.
    pub probes: &'a [(f64, f64)],
    /// The filter's σ of hot face, shell, q(0), q(L) (the readings' part).
    pub filter_sigma: [f64; TRANSIENT_OUTPUTS],
    /// Estimated q(0) and q(L), W/m².
    pub flux_hot_face_w_m2: f64,
    pub flux_shell_w_m2: f64,
    /// Slope of the shell's surface loss, d q(L) / d T_shell, W/m²K.
    pub shell_slope_w_m2k: f64,
}

/// Sub-steps of the profile integrals of [`transient_budget`].
const TRANSIENT_STEPS: usize = 48;

/// The budget of the transient model's hot face, shell and fluxes
/// (outputs 0..4 by the `OUT_*` indices) by a linearisation of the current
/// profile about the probes, which pin the temperatures where they sit.
/// With `S(a, b) = ∫_a^b ρc_p ∂T/∂t dx` the heat stored between two depths,
/// `x_a` the shallowest and `x_b` the deepest probe:
///
/// - `q(0) = q(x_a) + S(0, x_a)`: the conduction through the probed span
///   scales with that span's conductivities (each layer by its share of the
///   span's resistance `∫dx/k`), the stored part with ρc_p;
/// - `T(0) − T(x_a) = ∫_0^{x_a} q/k dx`: the conducted part is fixed by the
///   probes, the stored part `∫_0^{x_a} S(x, x_a)/k dx` scales with
///   ρc_p / k;
/// - the shell from the deepest probe through the resistance `R` of
///   `[x_b, L]` and the surface loss: `T_b − T_s = q(T_s) R` gives
///   `∂T_s/∂ln k_j = q R_j / (1 + h' R)` and `∂T_s/∂x_b = (q/k_b) / (1 + h' R)`
///   (`h'` the loss slope); `q(L)` follows as `h' ∂T_s`;
/// - depths: the shallowest probe moves the hot-face extrapolation by
///   `q/k` per metre; the two shallowest probes' spacing carries the
///   conducted flux.
///
/// A first-order budget of our own derivation, not a Monte Carlo of the
/// filter (which would have to re-run its whole history per draw).
pub fn transient_budget(inp: &TransientInputs<'_>) -> Option<Budget> {
    let n = inp.nodes.len();
    if n < 2 || inp.probes.is_empty() || inp.layers.is_empty() {
        return None;
    }
    let thickness: f64 = inp.layers.iter().map(|l| l.thickness_m).sum();
    let layer_of = |x: f64| {
        let mut end = 0.0;
        for (i, l) in inp.layers.iter().enumerate() {
            end += l.thickness_m;
            if x <= end + 1e-12 {
                return i;
            }
        }
        inp.layers.len() - 1
    };
    // Linear interpolation of temperature and rate between nodes.
    let at = |x: f64| {
        let x = x.clamp(inp.nodes[0].0, inp.nodes[n - 1].0);
        for w in inp.nodes.windows(2) {
            let (x0, t0, r0) = w[0];
            let (x1, t1, r1) = w[1];
            if x <= x1 {
                let f = if x1 > x0 { (x - x0) / (x1 - x0) } else { 0.0 };
                return (t0 + f * (t1 - t0), r0 + f * (r1 - r0));
            }
        }
        (inp.nodes[n - 1].1, inp.nodes[n - 1].2)
    };
    let k_at = |x: f64, t: f64| inp.layers[layer_of(x)].material.conductivity_w_mk.at(t);
    let c_at = |x: f64, t: f64| inp.layers[layer_of(x)].material.heat_capacity_j_m3k(t);

    let mut xa = f64::INFINITY;
    let mut xb = f64::NEG_INFINITY;
    let (mut sa, mut sb) = (0.0, 0.0);
    for &(x, s) in inp.probes {
        if x < xa {
            (xa, sa) = (x, s);
        }
        if x > xb {
            (xb, sb) = (x, s);
        }
    }
    // The second-shallowest distinct probe, for the span's gradient.
    let mut second: Option<(f64, f64)> = None;
    for &(x, s) in inp.probes {
        if x > xa + 1e-6 && second.is_none_or(|(x2, _)| x < x2) {
            second = Some((x, s));
        }
    }

    let mut b = Budget::zero(TRANSIENT_OUTPUTS);
    b.thermocouple[..TRANSIENT_OUTPUTS].copy_from_slice(&inp.filter_sigma);
    let mut k_var = [[0.0; TRANSIENT_OUTPUTS]; MAX_LAYERS];
    let mut c_var = [[0.0; TRANSIENT_OUTPUTS]; MAX_LAYERS];

    // Hot side: S(0, x_a) by layer, and ΔT_S = ∫_0^{x_a} S(x, x_a)/k dx by
    // layer, marching from x_a to the face.
    let mut s_by_layer = [0.0; MAX_LAYERS];
    let mut dts_by_layer = [0.0; MAX_LAYERS];
    if xa > 0.0 {
        let h = xa / TRANSIENT_STEPS as f64;
        let mut s_cum = 0.0;
        for i in 0..TRANSIENT_STEPS {
            let x_mid = xa - (i as f64 + 0.5) * h;
            let (t, r) = at(x_mid);
            let ds = c_at(x_mid, t) * r * h;
            let j = layer_of(x_mid);
            s_by_layer[j] += ds;
            // S(x_mid, x_a) at the middle of the step.
            let s_mid = s_cum + 0.5 * ds;
            s_cum += ds;
            dts_by_layer[j] += s_mid / k_at(x_mid, t) * h;
        }
    }
    let s_hot: f64 = s_by_layer.iter().sum();
    let q_cond = inp.flux_hot_face_w_m2 - s_hot;

    // Resistance shares of the probed span (the layer at x_a if the span is
    // a point).
    let mut r_span = [0.0; MAX_LAYERS];
    if xb > xa + 1e-6 {
        let h = (xb - xa) / TRANSIENT_STEPS as f64;
        for i in 0..TRANSIENT_STEPS {
            let x = xa + (i as f64 + 0.5) * h;
            let (t, _) = at(x);
            r_span[layer_of(x)] += h / k_at(x, t);
        }
    } else {
        r_span[layer_of(xa)] = 1.0;
    }
    let r_span_total: f64 = r_span.iter().sum();

    // Shell side: resistance of [x_b, L] by layer.
    let mut r_shell = [0.0; MAX_LAYERS];
    if thickness > xb + 1e-9 {
        let h = (thickness - xb) / TRANSIENT_STEPS as f64;
        for i in 0..TRANSIENT_STEPS {
            let x = xb + (i as f64 + 0.5) * h;
            let (t, _) = at(x);
            r_shell[layer_of(x)] += h / k_at(x, t);
        }
    }
    let r_shell_total: f64 = r_shell.iter().sum();
    let slope = inp.shell_slope_w_m2k.max(0.0);
    let damp = 1.0 + slope * r_shell_total;
    let ql = inp.flux_shell_w_m2;

    for (j, l) in inp.layers.iter().enumerate().take(MAX_LAYERS) {
        let (u, c) = (l.conductivity_rel, l.heat_capacity_rel);
        let dts_k = dts_by_layer[j] * u; // ∂T0/∂ln k = −ΔT_S,j
        let dts_c = dts_by_layer[j] * c;
        let q0_k = q_cond * r_span[j] / r_span_total * u;
        let q0_c = s_by_layer[j] * c;
        let ts_k = ql * r_shell[j] / damp * u;
        k_var[j] = [dts_k, ts_k, q0_k, slope * ts_k];
        c_var[j] = [dts_c, 0.0, q0_c, 0.0];
    }
    for i in 0..TRANSIENT_OUTPUTS {
        b.conductivity[i] = k_var.iter().map(|v| v[i] * v[i]).sum::<f64>().sqrt();
        b.heat_capacity[i] = c_var.iter().map(|v| v[i] * v[i]).sum::<f64>().sqrt();
    }

    // Depths.
    let (ta, _) = at(xa);
    b.depth[OUT_HOT_FACE] = (q_cond / k_at(xa, ta)).abs() * sa;
    if let Some((x2, s2)) = second {
        b.depth[OUT_FLUX_HOT_FACE] = q_cond.abs() * sa.hypot(s2) / (x2 - xa);
    }
    let (tb, _) = at(xb);
    let ts_x = (ql / k_at(xb, tb)).abs() / damp * sb;
    b.depth[OUT_SHELL] = ts_x;
    b.depth[OUT_FLUX_SHELL] = slope * ts_x;

    (0..TRANSIENT_OUTPUTS)
        .all(|i| b.total(i).is_finite())
        .then_some(b)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::material::Material;

    /// More samples than a steady fit takes: no budget at all, and the
    /// model is never run on the first MAX_PROBES of them.
    #[test]
    fn steady_budget_refuses_more_samples_than_a_fit_takes() {
        let sample = |i: usize| ProbeSample {
            depth_m: 0.01 * i as f64,
            temp_c: 900.0 - 10.0 * i as f64,
            sigma_c: 1.0,
        };
        let budget_of = |n: usize| {
            let samples: Vec<ProbeSample> = (0..n).map(sample).collect();
            let depth_sigma = vec![0.002; n];
            let inputs = SteadyInputs {
                samples: &samples,
                depth_sigma_m: &depth_sigma,
                conductivity_rel: &[0.15],
                thickness_m: 0.25,
                readings: true,
                slope_c_per_m: &[],
                mixed_terms: false,
            };
            let mut runs = 0;
            // A model whose outputs follow the readings: hot face = the first
            // reading, shell = the last.
            let budget = steady_budget(&inputs, |s, _, out| {
                runs += 1;
                out[OUT_HOT_FACE] = s[0].temp_c;
                out[OUT_SHELL] = s[s.len() - 1].temp_c;
                Some(2)
            });
            (budget, runs)
        };
        let (full, runs) = budget_of(MAX_PROBES);
        let full = full.expect("a budget for MAX_PROBES samples");
        assert!(runs > 1);
        // The hot face follows the first reading one for one: its σ (1 °C).
        assert!((full.thermocouple[OUT_HOT_FACE] - 1.0).abs() < 1e-9);
        assert_eq!(budget_of(MAX_PROBES + 1), (None, 0));
    }

    /// A steady single layer (no storage): the transient budget's
    /// conductivity part of q(0) is exactly u_k |q| (Fourier's law with the
    /// gradient pinned by the probes) and the hot face owes nothing to k or
    /// ρc_p; a probe at the shell pins the shell. A linear profile from
    /// 1000 °C to 100 °C over 0.25 m with k = 1.2 W/mK: q = 4320 W/m².
    #[test]
    fn steady_single_layer_transient_budget() {
        let m = Material::constant(1.2, 2000.0, 1000.0);
        let layers = [TransientLayerInput {
            material: &m,
            thickness_m: 0.25,
            conductivity_rel: 0.15,
            heat_capacity_rel: 0.10,
        }];
        let nodes: Vec<(f64, f64, f64)> = (0..=10)
            .map(|i| {
                let x = 0.025 * i as f64;
                (x, 1000.0 - 3600.0 * x, 0.0)
            })
            .collect();
        let q = 1.2 * 3600.0;
        let probes = [(0.05, 0.002), (0.15, 0.002), (0.25, 0.0)];
        let b = transient_budget(&TransientInputs {
            layers: &layers,
            nodes: &nodes,
            probes: &probes,
            filter_sigma: [1.0, 0.5, 20.0, 5.0],
            flux_hot_face_w_m2: q,
            flux_shell_w_m2: q,
            shell_slope_w_m2k: 15.0,
        })
        .unwrap();
        assert!((b.conductivity[OUT_FLUX_HOT_FACE] - 0.15 * q).abs() < 1e-9 * q);
        assert_eq!(b.conductivity[OUT_HOT_FACE], 0.0);
        assert_eq!(b.heat_capacity[OUT_FLUX_HOT_FACE], 0.0);
        assert_eq!(b.conductivity[OUT_SHELL], 0.0);
        // Depth: the hot face moves by the gradient 3600 K/m × 2 mm.
        assert!((b.depth[OUT_HOT_FACE] - 7.2).abs() < 1e-9);
        // The flux by √2 × 2 mm over the 100 mm spacing: 2.83 %.
        let want = q * (2.0f64).sqrt() * 0.002 / 0.1;
        assert!((b.depth[OUT_FLUX_HOT_FACE] - want).abs() < 1e-9 * q);
        assert_eq!(b.thermocouple[OUT_FLUX_HOT_FACE], 20.0);
    }

    /// A uniformly heating slab stores S = ρc ṙ x_a ahead of the shallowest
    /// probe: the heat-capacity part of q(0) is u_c S, and the hot face's
    /// stored drop ∫_0^{x_a} S(x, x_a)/k dx = ρc ṙ x_a²/(2k) shares u_k and
    /// u_c (closed forms of the integrals for a uniform rate).
    #[test]
    fn storage_ahead_of_the_probes_carries_heat_capacity() {
        let m = Material::constant(1.0, 2000.0, 1000.0);
        let layers = [TransientLayerInput {
            material: &m,
            thickness_m: 0.3,
            conductivity_rel: 0.15,
            heat_capacity_rel: 0.10,
        }];
        let r = 100.0 / 3600.0; // 100 °C/h everywhere
        let nodes: Vec<(f64, f64, f64)> = (0..=12)
            .map(|i| (0.025 * i as f64, 800.0 - 2000.0 * 0.025 * i as f64, r))
            .collect();
        let xa = 0.06;
        let probes = [(xa, 0.0), (0.2, 0.0)];
        let b = transient_budget(&TransientInputs {
            layers: &layers,
            nodes: &nodes,
            probes: &probes,
            filter_sigma: [0.0; 4],
            flux_hot_face_w_m2: 5000.0,
            flux_shell_w_m2: 500.0,
            shell_slope_w_m2k: 12.0,
        })
        .unwrap();
        let s = 2.0e6 * r * xa;
        assert!((b.heat_capacity[OUT_FLUX_HOT_FACE] - 0.10 * s).abs() < 1e-6 * s);
        assert!((b.conductivity[OUT_FLUX_HOT_FACE] - 0.15 * (5000.0 - s)).abs() < 1e-6 * s);
        let dts = 2.0e6 * r * xa * xa / 2.0;
        assert!((b.heat_capacity[OUT_HOT_FACE] - 0.10 * dts).abs() < 1e-3 * dts);
        assert!((b.conductivity[OUT_HOT_FACE] - 0.15 * dts).abs() < 1e-3 * dts);
    }
}
