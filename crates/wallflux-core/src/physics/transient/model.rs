//! The bare wall model: the discretised heat equation, driven by a hot-face
//! temperature (or an insulated hot face), losing heat through the shell.
//!
//! # Discretisation
//!
//! Vertex-centred finite volumes. Each layer is cut into `cells_per_layer`
//! equal segments; nodes sit at segment ends, so there is a node on both faces
//! and on every interface. Node `j` owns half of each adjacent segment. With
//! perfect contact the shared interface node gives continuity of temperature,
//! and its control volume, straddling both materials, continuity of flux.
//!
//! Per step of length `Δt`, with coefficients evaluated at the temperatures at
//! the start of the step ("lagged"):
//!
//! - segment conductance `G_s = k_m,s / Δx_s`,
//!   `k_m,s = ∫_{T_s}^{T_{s+1}} k dT / (T_{s+1} − T_s)` (Kirchhoff mean,
//!   [`crate::physics::material::Property::mean_between`]); a segment never
//!   spans two materials, so no harmonic mean is needed, and the steady flux
//!   `G_s (T_s − T_{s+1})` is exact for a slab whose `k` varies with `T`
//!   (Incropera §3.2, variable conductivity);
//! - node capacity `C_j = Σ_halves ρ c_p(T_j) Δx/2`, J/(m²·K);
//! - shell: `q_L = h (T_L − T_eq)`, `h = h_c + h_r` of
//!   [`crate::physics::surface::surface_loss`] at the current shell
//!   temperature and `T_eq = (h_c T_∞ + h_r T_sur)/h`, which reproduces the
//!   correlation's loss exactly at that temperature;
//! - the θ-method: `C_j (T_j' − T_j)/Δt = θ R_j(T') + (1 − θ) R_j(T)`, with
//!   `R_j = F_{j−½} − F_{j+½}` the net inflow, `F_{s} = G_s (T_s − T_{s+1})`.
//!   θ = 1 is backward Euler, θ = ½ Crank–Nicolson.
//!
//! The system is tridiagonal with a positive diagonal that dominates its
//! row (an M-matrix), so the Thomas algorithm needs no pivoting and the
//! backward-Euler step is monotone at any `Δt` (no new extrema).
//!
//! # Energy
//!
//! The scheme is conservative by construction: each segment flux leaves one
//! node's balance and enters the next, so summing the node balances
//! telescopes to `Σ C_j ΔT_j = Δt (F_in − q_L)`. [`WallModel::energy`]
//! keeps those books with the fluxes the scheme used, recomputed from the
//! solved temperatures; a solve that did not satisfy its equations would
//! show as an imbalance.

use heapless::Vec as HVec;

use super::{TransientError, TransientLayer, MAX_LAYERS, MAX_NODES};
use crate::bounded::PushWithin;
use crate::physics::material::{Material, Property};
use crate::physics::surface::{surface_loss, SurfaceParams, ZERO_CELSIUS_K};

/// Temperature step of the central difference that gives the slope of the
/// shell loss, `dq/dT_s`, K.
const SHELL_SLOPE_STEP_K: f64 = 0.05;

/// How the shell surface loses heat.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ShellBoundary {
    /// The zone's shell surface: convection and radiation by
    /// [`surface_loss`], linearised each step at the current shell
    /// temperature.
    Surface(SurfaceParams),
    /// A fixed convection coefficient to a fluid at `ambient_c`
    /// (`h_w_m2k = 0` is an insulated shell).
    Convection { h_w_m2k: f64, ambient_c: f64 },
}

impl From<SurfaceParams> for ShellBoundary {
    fn from(p: SurfaceParams) -> Self {
        ShellBoundary::Surface(p)
    }
}

impl ShellBoundary {
    /// Checks the parameters.
    pub fn validate(&self) -> Result<(), TransientError> {
        match self {
            ShellBoundary::Surface(p) => Ok(p.validate()?),
            ShellBoundary::Convection { h_w_m2k, ambient_c } => {
                if !(h_w_m2k.is_finite() && *h_w_m2k >= 0.0) {
                    return Err(TransientError::ShellCoefficient(*h_w_m2k));
                }
                check_temperature("ambient temperature", *ambient_c)
            }
        }
    }

    /// The air (fluid) temperature the shell loses heat to, °C.
    pub fn ambient_c(&self) -> f64 {
        match self {
            ShellBoundary::Surface(p) => p.ambient_c,
            ShellBoundary::Convection { ambient_c, .. } => *ambient_c,
        }
    }

    /// Heat flux leaving the shell at `shell_c`, W/m² (positive outward).
    pub fn flux_w_m2(&self, shell_c: f64) -> f64 {
        match self {
            ShellBoundary::Surface(p) => surface_loss(shell_c, p).flux_w_m2,
            ShellBoundary::Convection { h_w_m2k, ambient_c } => h_w_m2k * (shell_c - ambient_c),
        }
    }

    /// Slope `dq/dT_s` of the shell loss at `shell_c`, W/(m²·K): exact for a
    /// fixed coefficient, a central difference of [`surface_loss`] otherwise
    /// (larger than the secant `h`, since both coefficients rise with `T_s`).
    pub fn flux_slope_w_m2k(&self, shell_c: f64) -> f64 {
        match self {
            ShellBoundary::Surface(_) => {
                let d = SHELL_SLOPE_STEP_K;
                (self.flux_w_m2(shell_c + d) - self.flux_w_m2(shell_c - d)) / (2.0 * d)
            }
            ShellBoundary::Convection { h_w_m2k, .. } => *h_w_m2k,
        }
    }

    /// Secant linearisation at `shell_c`: `(h, T_eq)` with
    /// `q = h (T_s − T_eq)` exact at `shell_c`.
    fn linearised(&self, shell_c: f64) -> (f64, f64) {
        match self {
            ShellBoundary::Surface(p) => {
                let s = surface_loss(shell_c, p);
                let h = s.h_convection_w_m2k + s.h_radiation_w_m2k;
                if h > 0.0 {
                    let t_eq = (s.h_convection_w_m2k * p.ambient_c
                        + s.h_radiation_w_m2k * p.surroundings_c)
                        / h;
                    (h, t_eq)
                } else {
                    // Emissivity 0 and no convection: an insulated shell.
                    (0.0, p.ambient_c)
                }
            }
            ShellBoundary::Convection { h_w_m2k, ambient_c } => (*h_w_m2k, *ambient_c),
        }
    }
}

/// Time discretisation of the θ-method.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum TimeScheme {
    /// Backward Euler, θ = 1: first order in time, L-stable and monotone at
    /// any step (the estimator's scheme).
    #[default]
    BackwardEuler,
    /// Crank–Nicolson, θ = ½: second order in time for constant properties
    /// (first order with lagged temperature-dependent ones), A-stable but not
    /// L-stable: a sudden change with a long step rings.
    CrankNicolson,
}

impl TimeScheme {
    fn theta(self) -> f64 {
        match self {
            TimeScheme::BackwardEuler => 1.0,
            TimeScheme::CrankNicolson => 0.5,
        }
    }
}

/// What holds the hot face during a step.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum HotFace {
    /// Dirichlet: the face reaches this temperature at the end of the step
    /// (moving from its previous value).
    Temperature(f64),
    /// Adiabatic: no heat crosses the hot face (a symmetry plane).
    Insulated,
}

/// Heat crossing the wall since the model was built or its temperatures set,
/// per square metre, as booked by the scheme.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct EnergyTally {
    /// Heat that entered through the hot face, J/m².
    pub in_hot_face_j_m2: f64,
    /// Heat that left through the shell, J/m².
    pub out_shell_j_m2: f64,
    /// Heat stored, `Σ_steps Σ_j C_j ΔT_j` with the capacities of each step,
    /// J/m².
    pub stored_j_m2: f64,
}

/// The linear operator of one step, with its coefficients lagged and the
/// tridiagonal matrix factorised (Thomas algorithm, forward elimination done
/// once, so that each right-hand side costs two sweeps).
#[derive(Clone, Debug)]
pub(super) struct StepOperator {
    n: usize,
    /// First unknown node: 1 with a Dirichlet hot face, 0 when insulated.
    first: usize,
    theta: f64,
    dt_s: f64,
    /// Node capacities C_j, J/(m²·K).
    cap: [f64; MAX_NODES],
    /// Segment conductances G_s, W/(m²·K) (n − 1 used).
    g: [f64; MAX_NODES],
    /// Shell coefficient h and equivalent ambient T_eq.
    h_shell: f64,
    t_eq_c: f64,
    /// Sub-diagonal, reciprocal pivots and modified super-diagonal of the
    /// factorised matrix, indexed by node.
    lower: [f64; MAX_NODES],
    inv_pivot: [f64; MAX_NODES],
    c_prime: [f64; MAX_NODES],
}

impl StepOperator {
    /// Net inflow `R_j = F_{j−½} − F_{j+½}` of node `j` at temperatures `t`,
    /// W/m² (homogeneous: without `T_eq` when `forced` is false).
    fn net_inflow(&self, t: &[f64], j: usize, forced: bool) -> f64 {
        let n = self.n;
        let inflow = if j >= 1 {
            self.g[j - 1] * (t[j - 1] - t[j])
        } else {
            0.0
        };
        let outflow = if j + 1 < n {
            self.g[j] * (t[j] - t[j + 1])
        } else {
            let t_eq = if forced { self.t_eq_c } else { 0.0 };
            self.h_shell * (t[j] - t_eq)
        };
        inflow - outflow
    }

    /// One step from `old` (n node temperatures) into `out`, the hot face
    /// reaching `hot_new_c` (ignored when insulated). With `forced` false
    /// the ambient terms are dropped: the homogeneous map, `F` applied to a
    /// perturbation (the estimator's covariance propagation).
    pub(super) fn advance(&self, old: &[f64], hot_new_c: f64, forced: bool, out: &mut [f64]) {
        let n = self.n;
        let (theta, dt) = (self.theta, self.dt_s);
        let first = self.first;
        if first == 1 {
            out[0] = hot_new_c;
        }
        // Forward sweep: out[j] holds d'_j.
        let mut prev = 0.0;
        for j in first..n {
            let mut rhs = self.cap[j] / dt * old[j];
            if theta < 1.0 {
                rhs += (1.0 - theta) * self.net_inflow(old, j, forced);
            }
            if j == 1 && first == 1 {
                rhs += theta * self.g[0] * hot_new_c;
            }
            if j + 1 == n && forced {
                rhs += theta * self.h_shell * self.t_eq_c;
            }
            let d = (rhs - self.lower[j] * prev) * self.inv_pivot[j];
            out[j] = d;
            prev = d;
        }
        // Back substitution.
        for j in (first..n.saturating_sub(1)).rev() {
            out[j] -= self.c_prime[j] * out[j + 1];
        }
    }
}

/// A layered wall on a finite-volume grid: geometry, materials, the nodal
/// temperatures, the shell boundary and the energy books.
#[derive(Clone, Debug)]
pub struct WallModel {
    materials: HVec<Material, MAX_LAYERS>,
    /// Node index of every face between layers (internal interfaces), on
    /// the hot side of a contact resistance.
    interface_nodes: HVec<usize, MAX_LAYERS>,
    /// The same on the cold side: the next node where the interface has a
    /// contact resistance, the same node otherwise.
    interface_cold_nodes: HVec<usize, MAX_LAYERS>,
    /// Contact resistance carried by each segment, m²K/W (0: a conducting
    /// segment; > 0: a contact of zero thickness between two nodes at the
    /// same depth).
    seg_contact: [f64; MAX_NODES],
    n: usize,
    x_m: [f64; MAX_NODES],
    /// Layer of each segment (n − 1 used).
    seg_layer: [u8; MAX_NODES],
    t_c: [f64; MAX_NODES],
    /// Rate of the hot-face node over the last step, °C/s (Dirichlet).
    hot_face_rate_c_per_s: f64,
    /// Whether the last step had an insulated hot face.
    insulated: bool,
    shell: ShellBoundary,
    scheme: TimeScheme,
    time_s: f64,
    books: EnergyTally,
}

/// Whether a property is usable: constants finite and positive; tables
/// non-empty, values finite and positive, temperatures finite and rising.
/// (`Property`'s variants are public, so a table may not have been built by
/// `Property::table`.)
fn property_ok(p: &Property) -> bool {
    match p {
        Property::Constant(v) => v.is_finite() && *v > 0.0,
        Property::Table(pts) => {
            !pts.is_empty()
                && pts
                    .iter()
                    .all(|&(t, v)| t.is_finite() && v.is_finite() && v > 0.0)
                && pts.windows(2).all(|w| w[1].0 > w[0].0)
        }
        Property::Polynomial {
            coefficients,
            from_c,
            to_c,
        } => {
            coefficients.iter().all(|a| a.is_finite())
                && from_c < to_c
                && p.bounds()
                    .is_some_and(|(lo, hi)| lo > 0.0 && hi.is_finite())
        }
    }
}

/// Highest temperature the model accepts, °C. No lining survives near it;
/// it bounds the arithmetic (a reading of 1e300 °C is a fault, not heat).
pub const MAX_TEMPERATURE_C: f64 = 10_000.0;

/// Finite, above absolute zero and at most [`MAX_TEMPERATURE_C`].
pub(super) fn temperature_ok(t_c: f64) -> bool {
    t_c > -ZERO_CELSIUS_K && t_c <= MAX_TEMPERATURE_C
}

fn check_temperature(what: &'static str, value: f64) -> Result<(), TransientError> {
    if temperature_ok(value) {
        Ok(())
    } else {
        Err(TransientError::Temperature { what, value })
    }
}

/// Validates the layers and copies their materials.
pub(super) fn check_layers(
    layers: &[TransientLayer<'_>],
) -> Result<HVec<Material, MAX_LAYERS>, TransientError> {
    if layers.is_empty() {
        return Err(TransientError::NoLayers);
    }
    if layers.len() > MAX_LAYERS {
        return Err(TransientError::TooManyLayers(layers.len()));
    }
    let mut out = HVec::new();
    for (i, layer) in layers.iter().enumerate() {
        if !(layer.thickness_m.is_finite() && layer.thickness_m > 0.0) {
            return Err(TransientError::Thickness {
                layer: i,
                value: layer.thickness_m,
            });
        }
        let m = layer.material;
        let checks = [
            ("conductivity", property_ok(&m.conductivity_w_mk)),
            ("specific heat", property_ok(&m.specific_heat_j_kgk)),
            (
                "density",
                m.density_kg_m3.is_finite() && m.density_kg_m3 > 0.0,
            ),
        ];
        if let Some((what, _)) = checks.iter().find(|(_, ok)| !ok) {
            return Err(TransientError::Material { layer: i, what });
        }
        out.push_within(m.clone(), "layers")?;
    }
    Ok(out)
}

impl WallModel {
    /// A wall of `layers` (hot face side first), each cut into
    /// `cells_per_layer` equal segments (at most [`MAX_NODES`] nodes in all),
    /// every node at `initial_c`, losing heat through `shell`. Backward Euler
    /// unless [`Self::with_scheme`] says otherwise.
    pub fn new(
        layers: &[TransientLayer<'_>],
        cells_per_layer: usize,
        shell: ShellBoundary,
        initial_c: f64,
    ) -> Result<Self, TransientError> {
        let materials = check_layers(layers)?;
        if cells_per_layer < 1 {
            return Err(TransientError::TooFewCells(cells_per_layer));
        }
        let contacts = layers.iter().filter(|l| l.contact_m2k_w > 0.0).count();
        let nodes = layers
            .len()
            .checked_mul(cells_per_layer)
            .and_then(|s| s.checked_add(1 + contacts))
            .unwrap_or(usize::MAX);
        if nodes > MAX_NODES {
            return Err(TransientError::TooManyNodes {
                layers: layers.len(),
                cells_per_layer,
                nodes,
            });
        }
        shell.validate()?;
        check_temperature("initial temperature", initial_c)?;

        let mut x_m = [0.0; MAX_NODES];
        let mut seg_layer = [0u8; MAX_NODES];
        let mut seg_contact = [0.0; MAX_NODES];
        let mut interface_nodes = HVec::new();
        let mut interface_cold_nodes = HVec::new();
        let mut x_start = 0.0;
        let mut node = 0;
        for (i, layer) in layers.iter().enumerate() {
            for m in 1..=cells_per_layer {
                // Layer count ≤ MAX_LAYERS = 8 fits a u8.
                seg_layer[node] = i as u8;
                node += 1;
                x_m[node] = if m == cells_per_layer {
                    x_start + layer.thickness_m
                } else {
                    x_start + layer.thickness_m * m as f64 / cells_per_layer as f64
                };
            }
            x_start += layer.thickness_m;
            if i + 1 < layers.len() {
                interface_nodes.push_within(node, "layer interfaces")?;
                if layer.contact_m2k_w > 0.0 {
                    // A zero-thickness segment: the contact's conductance
                    // 1/R between two nodes at the same depth.
                    seg_layer[node] = i as u8;
                    seg_contact[node] = layer.contact_m2k_w;
                    node += 1;
                    x_m[node] = x_start;
                }
                interface_cold_nodes.push_within(node, "layer interfaces")?;
            }
        }
        let mut t_c = [0.0; MAX_NODES];
        t_c[..nodes].fill(initial_c);
        Ok(WallModel {
            materials,
            interface_nodes,
            interface_cold_nodes,
            seg_contact,
            n: nodes,
            x_m,
            seg_layer,
            t_c,
            hot_face_rate_c_per_s: 0.0,
            insulated: false,
            shell,
            scheme: TimeScheme::default(),
            time_s: 0.0,
            books: EnergyTally::default(),
        })
    }

    /// Re-places the nodes of every layer graded towards the hot face and
    /// the depths `focus_m` ([`super::grid`]), for a zone interval of
    /// `interval_s`; the node count, the layer faces and the temperatures
    /// stay. Every cell keeps a positive width.
    pub fn graded(mut self, focus_m: &[f64], interval_s: f64) -> Self {
        // The hot face and every finite depth, clamped into the wall: read
        // from the caller's slice each time, so however many depths there
        // are, none is dropped for want of room.
        let l = self.thickness_m();
        let focus = core::iter::once(0.0).chain(
            focus_m
                .iter()
                .filter(|f| f.is_finite())
                .map(move |f| f.clamp(0.0, l)),
        );
        let layers = self.materials.len();
        for i in 0..layers {
            let first = match i.checked_sub(1) {
                Some(k) => self.interface_cold_nodes[k],
                None => 0,
            };
            let last = self.interface_nodes.get(i).copied().unwrap_or(self.n - 1);
            let m = &self.materials[i];
            let t = self.t_c[first];
            let alpha = m.conductivity_w_mk.at(t) / (m.density_kg_m3 * m.specific_heat_j_kgk.at(t));
            let width = super::grid::focus_width_m(alpha, interval_s);
            let (start, end) = (self.x_m[first], self.x_m[last]);
            let mut x = [0.0; MAX_NODES];
            let cells = last - first;
            super::grid::graded_layer(start, end, focus.clone(), width, &mut x[..=cells]);
            if x[..=cells].windows(2).all(|w| w[1] > w[0]) {
                self.x_m[first..=last].copy_from_slice(&x[..=cells]);
            }
        }
        self
    }

    /// The same wall with another time scheme.
    pub fn with_scheme(mut self, scheme: TimeScheme) -> Self {
        self.scheme = scheme;
        self
    }

    /// Advances by `dt_s` with the hot face reaching `hot_face_c` at the end
    /// of the step (Dirichlet). Errors leave the wall unchanged:
    /// [`TransientError::TimeStep`], [`TransientError::Temperature`],
    /// [`TransientError::Numerical`].
    pub fn step(&mut self, dt_s: f64, hot_face_c: f64) -> Result<(), TransientError> {
        check_temperature("hot-face temperature", hot_face_c)?;
        self.step_with(dt_s, HotFace::Temperature(hot_face_c))
    }

    /// Advances by `dt_s` with no heat crossing the hot face (a symmetry
    /// plane: the centre of a slab heated or cooled from both sides).
    pub fn step_insulated(&mut self, dt_s: f64) -> Result<(), TransientError> {
        self.step_with(dt_s, HotFace::Insulated)
    }

    pub(super) fn step_with(&mut self, dt_s: f64, hot: HotFace) -> Result<(), TransientError> {
        let op = self.operator(dt_s, hot)?;
        let hot_new = match hot {
            HotFace::Temperature(t) => t,
            HotFace::Insulated => f64::NAN,
        };
        let mut new = [0.0; MAX_NODES];
        let n = self.n;
        op.advance(&self.t_c[..n], hot_new, true, &mut new[..n]);
        if !new[..n].iter().all(|&t| temperature_ok(t)) {
            return Err(TransientError::Numerical);
        }
        self.book(&op, &new[..n]);
        self.hot_face_rate_c_per_s = match hot {
            HotFace::Temperature(_) => (new[0] - self.t_c[0]) / dt_s,
            HotFace::Insulated => 0.0,
        };
        self.insulated = matches!(hot, HotFace::Insulated);
        self.t_c[..n].copy_from_slice(&new[..n]);
        self.time_s += dt_s;
        Ok(())
    }

    /// Adds one step to the energy books, with the step's own coefficients
    /// and θ-weighted fluxes recomputed from the old and new temperatures.
    fn book(&mut self, op: &StepOperator, new: &[f64]) {
        let n = self.n;
        let old = &self.t_c[..n];
        let (theta, dt) = (op.theta, op.dt_s);
        let stored: f64 = (0..n).map(|j| op.cap[j] * (new[j] - old[j])).sum();
        let q_in = if op.first == 1 {
            let f = |t: &[f64]| op.g[0] * (t[0] - t[1]);
            // What node 0's half cell stored plus what it passed on.
            op.cap[0] * (new[0] - old[0]) + dt * (theta * f(new) + (1.0 - theta) * f(old))
        } else {
            0.0
        };
        let last = n - 1;
        let f_l = |t: &[f64]| op.h_shell * (t[last] - op.t_eq_c);
        let q_out = dt * (theta * f_l(new) + (1.0 - theta) * f_l(old));
        self.books.in_hot_face_j_m2 += q_in;
        self.books.out_shell_j_m2 += q_out;
        self.books.stored_j_m2 += stored;
    }

    /// The lagged, factorised operator of one step of `dt_s` from the current
    /// temperatures.
    pub(super) fn operator(&self, dt_s: f64, hot: HotFace) -> Result<StepOperator, TransientError> {
        if !(dt_s.is_finite() && dt_s > 0.0) {
            return Err(TransientError::TimeStep(dt_s));
        }
        let n = self.n;
        let theta = self.scheme.theta();
        let first = match hot {
            HotFace::Temperature(_) => 1,
            HotFace::Insulated => 0,
        };
        let mut op = StepOperator {
            n,
            first,
            theta,
            dt_s,
            cap: [0.0; MAX_NODES],
            g: [0.0; MAX_NODES],
            h_shell: 0.0,
            t_eq_c: 0.0,
            lower: [0.0; MAX_NODES],
            inv_pivot: [0.0; MAX_NODES],
            c_prime: [0.0; MAX_NODES],
        };
        for s in 0..n - 1 {
            op.g[s] = self.conductance(s, self.t_c[s], self.t_c[s + 1]);
        }
        for j in 0..n {
            op.cap[j] = self.capacity(j, self.t_c[j]);
        }
        let (h, t_eq) = self.shell.linearised(self.t_c[n - 1]);
        op.h_shell = h;
        op.t_eq_c = t_eq;
        let mut prev_c = 0.0;
        for j in first..n {
            let g_left = if j >= 1 { op.g[j - 1] } else { 0.0 };
            let g_right = if j + 1 < n { op.g[j] } else { h };
            let diag = op.cap[j] / dt_s + theta * (g_left + g_right);
            let lower = if j > first { -theta * g_left } else { 0.0 };
            let upper = if j + 1 < n { -theta * op.g[j] } else { 0.0 };
            let pivot = diag - lower * prev_c;
            if !(pivot.is_finite() && pivot > 0.0) {
                return Err(TransientError::Numerical);
            }
            op.lower[j] = lower;
            op.inv_pivot[j] = 1.0 / pivot;
            op.c_prime[j] = upper / pivot;
            prev_c = op.c_prime[j];
        }
        let finite = op.g[..n - 1]
            .iter()
            .chain(&op.cap[..n])
            .all(|v| v.is_finite())
            && h.is_finite()
            && t_eq.is_finite();
        if finite {
            Ok(op)
        } else {
            Err(TransientError::Numerical)
        }
    }

    /// `G = k_m / Δx` of segment `s` between temperatures `a` and `b`,
    /// W/(m²·K) (Kirchhoff mean conductivity).
    pub(super) fn conductance(&self, s: usize, a_c: f64, b_c: f64) -> f64 {
        let contact = self.seg_contact.get(s).copied().unwrap_or(0.0);
        if contact > 0.0 {
            return 1.0 / contact;
        }
        match self.segment_material(s) {
            Some(m) => m.conductivity_w_mk.mean_between(a_c, b_c) / self.segment_dx(s),
            None => 0.0,
        }
    }

    /// Conductivity of segment `s`'s material at `t_c`, W/(m·K).
    pub(super) fn segment_k(&self, s: usize, t_c: f64) -> f64 {
        self.segment_material(s)
            .map_or(f64::NAN, |m| m.conductivity_w_mk.at(t_c))
    }

    /// Capacity of node `j` at `t_c`: `Σ ρ c_p(t) Δx/2` over its half cells,
    /// J/(m²·K).
    pub(super) fn capacity(&self, j: usize, t_c: f64) -> f64 {
        let mut c = 0.0;
        let n = self.n;
        if j >= 1 && j < n {
            c += self.half_capacity(j - 1, t_c);
        }
        if j + 1 < n {
            c += self.half_capacity(j, t_c);
        }
        c
    }

    /// `d C_j / dT` at `t_c`, J/(m²·K²).
    pub(super) fn capacity_slope(&self, j: usize, t_c: f64) -> f64 {
        let half = |s: usize| {
            self.segment_material(s).map_or(0.0, |m| {
                m.density_kg_m3 * m.specific_heat_j_kgk.slope_at(t_c) * 0.5 * self.segment_dx(s)
            })
        };
        let mut c = 0.0;
        if j >= 1 && j < self.n {
            c += half(j - 1);
        }
        if j + 1 < self.n {
            c += half(j);
        }
        c
    }

    fn half_capacity(&self, s: usize, t_c: f64) -> f64 {
        self.segment_material(s).map_or(0.0, |m| {
            m.density_kg_m3 * m.specific_heat_j_kgk.at(t_c) * 0.5 * self.segment_dx(s)
        })
    }

    fn segment_material(&self, s: usize) -> Option<&Material> {
        self.seg_layer
            .get(s)
            .and_then(|&i| self.materials.get(usize::from(i)))
    }

    pub(super) fn segment_dx(&self, s: usize) -> f64 {
        match (self.x_m.get(s), self.x_m.get(s + 1)) {
            (Some(a), Some(b)) => b - a,
            _ => f64::NAN,
        }
    }

    /// Number of nodes.
    pub fn node_count(&self) -> usize {
        self.n
    }

    /// Node depths from the hot face, m (faces and interfaces included).
    pub fn node_depths_m(&self) -> &[f64] {
        &self.x_m[..self.n]
    }

    /// Node temperatures, °C, in the order of [`Self::node_depths_m`].
    pub fn node_temperatures_c(&self) -> &[f64] {
        &self.t_c[..self.n]
    }

    pub(super) fn node_temperatures_mut(&mut self) -> &mut [f64] {
        &mut self.t_c[..self.n]
    }

    /// Node index of each internal interface, hot face side first (the hot
    /// side of a contact resistance).
    pub fn interface_nodes(&self) -> &[usize] {
        &self.interface_nodes
    }

    /// Node index of the cold side of each internal interface: the node
    /// after the hot side's across a contact resistance, the same node
    /// where the contact is perfect.
    pub fn interface_cold_nodes(&self) -> &[usize] {
        &self.interface_cold_nodes
    }

    /// Contact resistance of each layer's cold side, m²K/W (0 for the last),
    /// in the first `materials().len()` entries.
    pub(super) fn contacts_m2k_w(&self) -> [f64; MAX_LAYERS] {
        // A fixed array, one slot per possible layer: the interfaces (one
        // fewer than the layers) fill the first slots through the zip, and
        // the last layer's slot keeps its 0. Nothing can be left out.
        let mut out = [0.0; MAX_LAYERS];
        let interfaces = self.interface_nodes.iter().zip(&self.interface_cold_nodes);
        for (r, (&hot, &cold)) in out.iter_mut().zip(interfaces) {
            *r = if cold > hot {
                self.seg_contact[hot]
            } else {
                0.0
            };
        }
        out
    }

    /// Total thickness L, m.
    pub fn thickness_m(&self) -> f64 {
        self.x_m[self.n - 1]
    }

    /// The shell boundary.
    pub fn shell(&self) -> &ShellBoundary {
        &self.shell
    }

    /// The wall's materials, hot face side first.
    pub(super) fn materials(&self) -> &[Material] {
        &self.materials
    }

    /// Depth of each layer's shell-side face, m, in the first
    /// `materials().len()` entries.
    pub(super) fn layer_ends_m(&self) -> [f64; MAX_LAYERS] {
        // A fixed array as in `contacts_m2k_w`: the interfaces fill the first
        // slots, and the last layer's slot keeps the total thickness.
        let mut ends = [self.thickness_m(); MAX_LAYERS];
        for (end, &j) in ends.iter_mut().zip(&self.interface_nodes) {
            *end = self.x_m[j];
        }
        ends
    }

    /// Time simulated, s.
    pub fn time_s(&self) -> f64 {
        self.time_s
    }

    /// Sets every node temperature (hot face first) and restarts the energy
    /// books and the hot-face rate. Errors: [`TransientError::NodeCount`],
    /// [`TransientError::Temperature`].
    pub fn set_temperatures(&mut self, t_c: &[f64]) -> Result<(), TransientError> {
        if t_c.len() != self.n {
            return Err(TransientError::NodeCount {
                expected: self.n,
                got: t_c.len(),
            });
        }
        if let Some(&bad) = t_c.iter().find(|&&t| !temperature_ok(t)) {
            return Err(TransientError::Temperature {
                what: "node temperature",
                value: bad,
            });
        }
        self.t_c[..self.n].copy_from_slice(t_c);
        self.hot_face_rate_c_per_s = 0.0;
        self.books = EnergyTally::default();
        Ok(())
    }

    pub(super) fn set_hot_face_rate(&mut self, rate_c_per_s: f64) {
        self.hot_face_rate_c_per_s = rate_c_per_s;
    }

    /// Segment index and fraction within it of `depth_m` (clamped to the
    /// wall), or `None` for NaN.
    pub(super) fn locate(&self, depth_m: f64) -> Option<(usize, f64)> {
        if depth_m.is_nan() {
            return None;
        }
        let x = self.node_depths_m();
        let d = depth_m.clamp(0.0, self.thickness_m());
        let upper = x.partition_point(|&xi| xi <= d).clamp(1, self.n - 1);
        let s = upper - 1;
        Some((s, ((d - x[s]) / (x[upper] - x[s])).clamp(0.0, 1.0)))
    }

    /// Interpolation weights of the temperature at `depth_m` (clamped to the
    /// wall) on the nodes: Lagrange quadratic through the three nearest
    /// nodes of the layer that holds the depth (linear in a one-cell layer),
    /// so that a curved profile is read to O(Δx³) and never across an
    /// interface, where the gradient jumps. Unused slots have weight 0.
    /// `None` for NaN.
    pub(super) fn interpolation(&self, depth_m: f64) -> Option<[(usize, f64); 3]> {
        let (s, f) = self.locate(depth_m)?;
        let layer = usize::from(self.seg_layer[s]);
        let first = match layer.checked_sub(1) {
            Some(i) => self.interface_cold_nodes.get(i).copied().unwrap_or(0),
            None => 0,
        };
        let last = self
            .interface_nodes
            .get(layer)
            .copied()
            .unwrap_or(self.n - 1);
        if last < first + 2 {
            return Some([(s, 1.0 - f), (s + 1, f), (s, 0.0)]);
        }
        let j0 = if f < 0.5 { s.saturating_sub(1) } else { s }.clamp(first, last - 2);
        let x = &self.x_m;
        let d = depth_m.clamp(0.0, self.thickness_m());
        let (x0, x1, x2) = (x[j0], x[j0 + 1], x[j0 + 2]);
        Some([
            (j0, (d - x1) * (d - x2) / ((x0 - x1) * (x0 - x2))),
            (j0 + 1, (d - x0) * (d - x2) / ((x1 - x0) * (x1 - x2))),
            (j0 + 2, (d - x0) * (d - x1) / ((x2 - x0) * (x2 - x1))),
        ])
    }

    /// Temperature at `depth_m`, °C: Lagrange quadratic through the three
    /// nearest nodes of the layer that holds the depth (linear in a one-cell
    /// layer), never across an interface; depths outside the wall are
    /// clamped to it; NaN gives NaN.
    pub fn temperature_at(&self, depth_m: f64) -> f64 {
        self.interpolation(depth_m)
            .map_or(f64::NAN, |w| w.iter().map(|&(j, a)| a * self.t_c[j]).sum())
    }

    /// Hot-face temperature, °C.
    pub fn hot_face_c(&self) -> f64 {
        self.t_c[0]
    }

    /// Shell temperature, °C.
    pub fn shell_c(&self) -> f64 {
        self.t_c[self.n - 1]
    }

    /// Rate of every node by the semi-discrete model at the current
    /// temperatures, °C/s: `Ṫ_j = (F_{j−½} − F_{j+½}) / C_j` with the
    /// Kirchhoff fluxes and the shell loss; the hot face (Dirichlet) moves at
    /// its given rate.
    pub(super) fn node_rates(&self) -> [f64; MAX_NODES] {
        let n = self.n;
        let t = &self.t_c;
        let mut flux = [0.0; MAX_NODES];
        for (s, f) in flux.iter_mut().enumerate().take(n - 1) {
            *f = self.conductance(s, t[s], t[s + 1]) * (t[s] - t[s + 1]);
        }
        let q_shell = self.shell.flux_w_m2(t[n - 1]);
        let mut rate = [0.0; MAX_NODES];
        for (j, r) in rate.iter_mut().enumerate().take(n) {
            let inflow = if j >= 1 { flux[j - 1] } else { 0.0 };
            let outflow = if j + 1 < n { flux[j] } else { q_shell };
            *r = (inflow - outflow) / self.capacity(j, t[j]);
        }
        if !self.insulated {
            rate[0] = self.hot_face_rate_c_per_s;
        }
        rate
    }

    /// The model rate `∂T/∂t` at `depth_m`, °C/s: the semi-discrete nodal
    /// rates `(F_{j−½} − F_{j+½}) / C_j` at the current temperatures (the
    /// hot face at its given rate), linear between nodes.
    pub fn rate_c_per_s_at(&self, depth_m: f64) -> f64 {
        let rate = self.node_rates();
        self.locate(depth_m)
            .map_or(f64::NAN, |(s, f)| rate[s] + f * (rate[s + 1] - rate[s]))
    }

    /// Heat flux entering at the hot face, W/m²: the first segment's flux
    /// plus what the hot face's half cell stores, `F_½ + C_0 Ṫ_0` (zero when
    /// insulated).
    pub fn flux_hot_face_w_m2(&self) -> f64 {
        if self.insulated {
            return 0.0;
        }
        let t = &self.t_c;
        self.conductance(0, t[0], t[1]) * (t[0] - t[1])
            + self.capacity(0, t[0]) * self.hot_face_rate_c_per_s
    }

    /// Heat flux leaving through the shell, W/m²: the shell loss at the
    /// current shell temperature.
    pub fn flux_shell_w_m2(&self) -> f64 {
        self.shell.flux_w_m2(self.shell_c())
    }

    /// Power being stored in the wall, `Σ C_j Ṫ_j ≈ ∫ ρ c_p ∂T/∂t dx`, W/m²;
    /// equal to `q(0) − q(L)` by the scheme's conservation.
    pub fn stored_w_m2(&self) -> f64 {
        let rate = self.node_rates();
        (0..self.n)
            .map(|j| self.capacity(j, self.t_c[j]) * rate[j])
            .sum()
    }

    /// The energy books since [`Self::new`] or [`Self::set_temperatures`].
    pub fn energy(&self) -> EnergyTally {
        self.books
    }

    /// Enthalpy relative to 0 °C, `Σ ρ Δx/2 ∫_0^T c_p dT` over every half
    /// cell, J/m² (the exact stored heat, for checking the lagged books).
    pub fn enthalpy_j_m2(&self) -> f64 {
        let mut h = 0.0;
        for s in 0..self.n - 1 {
            if let Some(m) = self.segment_material(s) {
                let half = m.density_kg_m3 * 0.5 * self.segment_dx(s);
                h += half * m.specific_heat_j_kgk.integral(0.0, self.t_c[s]);
                h += half * m.specific_heat_j_kgk.integral(0.0, self.t_c[s + 1]);
            }
        }
        h
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn wall(material: &Material) -> WallModel {
        let layer = TransientLayer {
            material,
            thickness_m: 0.4,
            contact_m2k_w: 0.0,
        };
        let shell = ShellBoundary::Convection {
            h_w_m2k: 10.0,
            ambient_c: 20.0,
        };
        WallModel::new(&[layer], 20, shell, 20.0).unwrap()
    }

    /// Distance from `depth_m` to the nearest node, m.
    fn nearest_node(model: &WallModel, depth_m: f64) -> f64 {
        model
            .node_depths_m()
            .iter()
            .map(|x| (x - depth_m).abs())
            .fold(f64::INFINITY, f64::min)
    }

    #[test]
    fn graded_takes_every_focus_depth_however_many() {
        // More focus depths than the grid has nodes, the one that differs
        // last: it shapes the grid too, none is dropped for want of room.
        let m = Material::constant(1.3, 2150.0, 1000.0);
        let mut at_shell = vec![0.4; MAX_NODES + 6];
        let mut with_middle = at_shell.clone();
        with_middle.extend_from_slice(&[0.15]);
        at_shell.extend_from_slice(&[0.4]);
        let a = wall(&m).graded(&at_shell, 600.0);
        let b = wall(&m).graded(&with_middle, 600.0);
        assert_eq!(a.node_count(), b.node_count());
        // The shell's many copies draw most nodes there; the one focus at
        // 0.15 m still pulls a node towards itself.
        let (without, with) = (nearest_node(&a, 0.15), nearest_node(&b, 0.15));
        assert!(
            with < 0.5 * without,
            "nearest node to the last focus {with} m away, {without} m without it"
        );
    }

    #[test]
    fn layer_ends_and_contacts_have_one_entry_per_layer() {
        let m = Material::constant(1.3, 2150.0, 1000.0);
        let layers = [
            TransientLayer {
                material: &m,
                thickness_m: 0.2,
                contact_m2k_w: 0.01,
            },
            TransientLayer {
                material: &m,
                thickness_m: 0.1,
                contact_m2k_w: 0.0,
            },
        ];
        let shell = ShellBoundary::Convection {
            h_w_m2k: 10.0,
            ambient_c: 20.0,
        };
        let w = WallModel::new(&layers, 4, shell, 20.0).unwrap();
        let ends = w.layer_ends_m();
        assert!((ends[0] - 0.2).abs() < 1e-12 && (ends[1] - 0.3).abs() < 1e-12);
        let contacts = w.contacts_m2k_w();
        assert_eq!(&contacts[..2], &[0.01, 0.0]);
    }
}
