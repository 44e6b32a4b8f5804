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
//! follows a mild curvature). Pure, no IO, no heap: every buffer is a fixed
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
    pub fn shares_pct(&self, i: usize) -> Option<[f64; 4]> {
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
    if n_s > MAX_PROBES || inputs.depth_sigma_m.len() != n_s {
        return None;
    }
    let ones = [1.0; MAX_LAYERS];
    let mut work: HVec<ProbeSample, MAX_PROBES> = HVec::new();
    for s in inputs.samples {
        let _ = work.push(*s);
    }
    let mut nominal = [0.0; MAX_OUTPUTS];
    let n = model(&work, &ones, &mut nominal)?.min(MAX_OUTPUTS);
    let mut budget = Budget::zero(n);
    let mut plus = [0.0; MAX_OUTPUTS];
    let mut minus = [0.0; MAX_OUTPUTS];

    // Accumulates (contribution)² of one input: `scale` × (plus − minus).
    let add = |acc: &mut Outputs, plus: &Outputs, minus: &Outputs, scale: f64| {
        for i in 0..n {
            let d = (plus[i] - minus[i]) * scale;
            if plus[i].is_nan() && minus[i].is_nan() {
                continue; // an output this model does not have
            }
            acc[i] += d * d;
        }
    };

    for j in 0..n_s {
        // Reading: central difference over ±σ; its contribution is
        // σ · (f(+σ) − f(−σ)) / (2σ).
        let sd = inputs.samples[j].sigma_c;
        if sd > 0.0 {
            work[j].temp_c = inputs.samples[j].temp_c + sd;
            model(&work, &ones, &mut plus)?;
            work[j].temp_c = inputs.samples[j].temp_c - sd;
            model(&work, &ones, &mut minus)?;
            work[j].temp_c = inputs.samples[j].temp_c;
            add(&mut budget.thermocouple, &plus, &minus, 0.5);
        }
        // Depth: ±σ_x inside the wall, else one-sided inward.
        let sx = inputs.depth_sigma_m[j];
        if sx > 0.0 {
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
