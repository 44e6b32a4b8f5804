//! The `transient` zone model: the 1-D heat equation across the layers of a
//! wall, a Kalman filter that estimates the whole through-wall temperature
//! field (hot face included, even when no probe sits there) from the probes,
//! and forecasts of the shell and interface temperatures.
//!
//! Pure and allocation-free per step: no IO, no clock (time steps are passed
//! in), fixed-capacity storage. The estimator boxes its covariance once, in
//! [`TransientEstimator::new`]; nothing allocates afterwards.
//!
//! # Model
//!
//! `ρc_p ∂T/∂t = ∂/∂x (k ∂T/∂x)`, `x` from the hot face (0) to the shell (L),
//! `q = −k ∂T/∂x` positive outward (DEVELOPERS.md conventions; Incropera et al.,
//! *Fundamentals of Heat and Mass Transfer*, eq. 2.19 in one dimension).
//!
//! - Space: vertex-centred finite volumes, a node on both faces and on every
//!   interface ([`model`]); segment conductance `G = k_m / Δx` with the
//!   Kirchhoff mean `k_m = ∫k dT / ΔT` over the segment, so a steady profile
//!   is exact at the nodes on any grid; capacities `ρ c_p Δx/2` per half cell.
//! - Time: backward Euler (fully implicit) with `k`, `ρ c_p` and the shell
//!   coefficient lagged at the start of each step, one tridiagonal solve
//!   (Thomas algorithm) per step. Crank–Nicolson is available on the bare
//!   [`WallModel`] for tests; the estimator uses backward Euler (see the docs:
//!   `docs/transient-model.md`, "Why backward Euler").
//! - Boundaries: hot face Dirichlet (or insulated, on the bare model); shell
//!   Robin, `q = h (T_s − T_eq)` with `h = h_conv + h_rad` from
//!   [`crate::physics::surface::surface_loss`] at the current shell
//!   temperature (or a fixed `h`).
//!
//! # Estimator
//!
//! A linear Kalman filter over the state `[T_0 … T_{N−1}, Ṫ_hot]`: the nodal
//! temperatures (node 0 is the hot face) and the hot-face rate, a random
//! walk. With the coefficients lagged, one step is linear in that state, so
//! `F = A⁻¹B` is exact for the lagged model; `F P Fᵀ` is formed by Thomas
//! solves, never as a dense matrix. Probes update it one at a time (Joseph
//! form). Health is the windowed normalised innovation squared; a diverged
//! filter resets and re-initialises from the current readings through a
//! piecewise steady layered profile. See [`estimator`] and
//! `docs/transient-model.md`.

pub mod estimator;
pub mod grid;
pub mod model;
mod steady;

pub use estimator::{
    ForecastPoint, Limit, NodeEstimate, StepReport, TransientEstimator, TransientSettings,
};
pub use model::{EnergyTally, ShellBoundary, TimeScheme, WallModel, MAX_TEMPERATURE_C};

use crate::bounded::Full;
use crate::physics::material::Material;
use crate::physics::surface::SurfaceError;

/// Most nodes of the grid (faces and interfaces included).
pub const MAX_NODES: usize = 64;

/// Most layers of a wall (so at most `MAX_LAYERS − 1` internal interfaces):
/// the one capacity of `physics::layered`.
pub use crate::physics::layered::MAX_LAYERS;

/// Size of the filter state: every node plus the hot-face rate.
pub const MAX_STATE: usize = MAX_NODES + 1;

/// Most readings one estimator step takes (a zone has at most
/// [`crate::physics::layered::MAX_PROBES`]; a grid's worth leaves room).
pub const MAX_READINGS: usize = MAX_NODES;

/// Longest window of the filter-health statistic, in steps.
pub const MAX_NIS_WINDOW: usize = 64;

/// One layer of the wall, hot face side first.
#[derive(Debug, Clone, Copy)]
pub struct TransientLayer<'a> {
    /// The layer's material (copied into the model at construction).
    pub material: &'a Material,
    /// Thickness, m.
    pub thickness_m: f64,
    /// Contact resistance on the layer's cold side, m²·K/W (0: perfect
    /// contact; must be 0 on the last layer, whose cold face is the shell).
    pub contact_m2k_w: f64,
}

/// Errors building or driving the transient model.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TransientError {
    /// A wall needs at least one layer.
    #[error("a wall needs at least one layer")]
    NoLayers,
    /// More layers than [`MAX_LAYERS`].
    #[error("a wall may have at most {MAX_LAYERS} layers, got {0}")]
    TooManyLayers(usize),
    /// Each layer needs at least one cell.
    #[error("cells per layer must be at least 1, got {0}")]
    TooFewCells(usize),
    /// The grid would need more than [`MAX_NODES`] nodes.
    #[error("{layers} layers × {cells_per_layer} cells (and a node pair at each contact) need {nodes} nodes, more than {MAX_NODES}")]
    TooManyNodes {
        layers: usize,
        cells_per_layer: usize,
        nodes: usize,
    },
    /// A layer thickness must be finite and strictly positive.
    #[error("layer {layer}: thickness must be a positive number of metres, got {value}")]
    Thickness { layer: usize, value: f64 },
    /// A material property is missing, not finite, or not positive.
    #[error("layer {layer}: {what} must be finite and positive (tables: temperatures rising)")]
    Material { layer: usize, what: &'static str },
    /// The shell surface parameters are invalid.
    #[error("shell surface: {0}")]
    Surface(#[from] SurfaceError),
    /// A contact resistance must be finite and not negative, and the last
    /// layer (whose cold face is the shell surface) has none.
    #[error("layer {layer}: contact resistance must be a finite number ≥ 0 m²K/W, and none on the last layer; got {value}")]
    Contact { layer: usize, value: f64 },
    /// A fixed shell coefficient must be finite and not negative.
    #[error("shell heat-transfer coefficient must be a non-negative number of W/(m²·K), got {0}")]
    ShellCoefficient(f64),
    /// A temperature must lie above absolute zero and at most
    /// [`MAX_TEMPERATURE_C`].
    #[error("{what} must be a temperature above −273.15 °C and at most 10 000 °C, got {value}")]
    Temperature { what: &'static str, value: f64 },
    /// A time step must be finite and positive (zero allowed where stated).
    #[error("time step must be a finite positive number of seconds, got {0}")]
    TimeStep(f64),
    /// A setting is out of range.
    #[error("setting {what} is out of range: {value}")]
    Setting { what: &'static str, value: f64 },
    /// A temperature vector of the wrong length.
    #[error("expected {expected} node temperatures, got {got}")]
    NodeCount { expected: usize, got: usize },
    /// The solve produced a non-finite temperature (the state is unchanged).
    #[error("the step produced a non-finite or sub-absolute-zero temperature")]
    Numerical,
    /// A fixed capacity was reached (sizes are checked first, so this names
    /// a fault, never a shortened result).
    #[error(transparent)]
    Capacity(#[from] Full),
}
