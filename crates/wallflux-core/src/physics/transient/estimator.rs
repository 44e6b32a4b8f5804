//! The state estimator: a Kalman filter over the wall's nodal temperatures
//! and the hot-face rate, its outputs with standard uncertainties, its health
//! (normalised innovation squared) and forecasts.
//!
//! # State and model
//!
//! `x = [T_0, T_1, …, T_{N−1}, r]`: every node of the [`WallModel`] grid
//! (node 0 is the hot face, node N−1 the shell) and `r = dT_0/dt`, °C/s.
//! One predict step of `Δt`:
//!
//! - `T_0' = T_0 + r Δt`, `r' = r + w` (constant-rate kinematics, `w` a
//!   random walk of spectral density `q_r`: Bar-Shalom, Li & Kirubarajan,
//!   *Estimation with Applications to Tracking and Navigation*, §6.2, the
//!   white-noise-acceleration model, with "position" = hot-face temperature);
//! - the interior: one backward-Euler step of the wall with the hot face
//!   going to `T_0'` and coefficients lagged at the current mean. That step
//!   is linear in `x` (the coefficients do not depend on the state being
//!   propagated), so `x' = F x + u` with `F = A⁻¹B` exactly, and the linear
//!   Kalman filter is exact for the lagged model (Simon, *Optimal State
//!   Estimation*, 2006, ch. 5). `F P Fᵀ` is formed as `F (F P)ᵀ` by applying
//!   the step to every column: 2 (N + 1) pairs of Thomas sweeps, O(N²), no
//!   dense matrix product.
//!
//! Process noise: on `(T_0, r)` the discretised white-noise-acceleration
//! covariance `q_r [[Δt³/3, Δt²/2], [Δt²/2, Δt]]`; on the nodes a small
//! model-error random walk, correlated in depth,
//! `q_n Δt exp(−|x_i − x_j|/ℓ)`, `ℓ` = [`NODE_NOISE_CORRELATION_FRACTION`]
//! of the wall, so that its effect does not depend on the grid.
//!
//! # Measurements
//!
//! A probe at depth `d` measures `H x = Σ w_j T_j`, the Lagrange quadratic
//! through the three nearest nodes of the layer that holds it (linear in a
//! one-cell layer; never across an interface, where the gradient jumps),
//! with variance `R = σ²`. Linear interpolation would misread a heating
//! profile by `Δx² T''/8`, about 3 K on a 29 mm grid at 60 °C/h in
//! fireclay, more than the probe noise. Probes are
//! assimilated one at a time (sequential scalar updates, exact for
//! independent measurement errors), the covariance in Joseph form
//! `P = (I − KH) P (I − KH)ᵀ + K R Kᵀ`, which for a scalar update is
//! `P − K hᵀ − h Kᵀ + S K Kᵀ` with `h = P Hᵀ`, `S = H h + R`: symmetric by
//! construction and O(N²).
//!
//! # Health
//!
//! Each step's normalised innovation squared `Σ ν²/S` is χ² with as many
//! degrees of freedom as probes assimilated when the model is right (Bar-
//! Shalom et al. §5.4). Over the last `nis_window` steps the sum is compared
//! with the 99.9 % quantile of χ² for the summed degrees of freedom
//! (Wilson–Hilferty approximation); above it the filter is declared diverged,
//! reset, and re-initialised from the current readings. The first
//! `nis_window` steps after an initialisation settle unjudged, so that the
//! transient of a fresh start cannot trigger a chain of resets. The rule is
//! evaluated every step on a sliding window, so its false-alarm rate per
//! run is well above 0.1 %: about 4 % of 16-hour runs with the right model
//! in the tests (one reset each, after which the filter settles again).

use heapless::{Deque, Vec as HVec};

use super::model::{temperature_ok, HotFace, ShellBoundary, StepOperator, WallModel};
use super::steady::{self, Stack};
use super::{
    TransientError, TransientLayer, MAX_LAYERS, MAX_NIS_WINDOW, MAX_NODES, MAX_READINGS, MAX_STATE,
};
use crate::bounded::{Full, PushWithin};
use crate::physics::profile::{ProbeSample, DEPTH_TOLERANCE_M};

/// Seconds in an hour.
const S_PER_H: f64 = 3600.0;

/// Default time constant of the hot-face rate in forecasts, s (2 h, a
/// choice of ours: a trend of the last interval is not assumed to go on
/// for a whole shift, but a ramp's next hour is still followed closely).
pub const FORECAST_RATE_DAMPING_S: f64 = 2.0 * S_PER_H;

/// Time step of forecasts, s (the last step is shortened to end on the
/// horizon).
pub const FORECAST_STEP_S: f64 = 60.0;

/// Longest forecast horizon, s (7 days); longer requests are cut to it.
pub const MAX_FORECAST_HORIZON_S: f64 = 7.0 * 24.0 * S_PER_H;

/// Longest prediction step, s (6 h). After a longer gap in the readings the
/// estimate is stale: the filter resets and re-initialises from them.
pub const MAX_PREDICT_STEP_S: f64 = 6.0 * S_PER_H;

/// Smallest probe σ used, °C: a smaller stated σ is raised to it (no
/// thermocouple is known that well, and the gain must stay finite).
pub const MIN_SIGMA_C: f64 = 1e-3;

/// Standard uncertainty of the initial steady profile away from the hot
/// face, °C: the readings may come from a wall far from steady.
pub const INITIAL_PROFILE_SIGMA_C: f64 = 20.0;

/// Correlation length of the initial profile uncertainty, as a fraction of
/// the wall thickness (exponential kernel: a smooth, not a jagged, error).
pub const INITIAL_CORRELATION_FRACTION: f64 = 0.25;

/// Correlation length of the node model-error noise, as a fraction of the
/// wall thickness: the error of a 1-D model (properties, contact, grid) is
/// smooth in depth, and a correlated noise keeps its effect independent of
/// the grid (white noise per node would average away on a fine grid).
pub const NODE_NOISE_CORRELATION_FRACTION: f64 = 0.1;

/// Standard normal quantile of 0.999 (scipy.stats.norm.ppf(0.999)).
const Z_999: f64 = 3.090_232_306_167_813;

/// Tuning of the estimator.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransientSettings {
    /// Finite-volume cells in each layer, reduced if needed so that the
    /// grid has at most [`MAX_NODES`] nodes (layers × cells + 1).
    pub cells_per_layer: usize,
    /// Random-walk intensity of the hot-face rate, (°C/h)/√h: the standard
    /// deviation of the change of the rate over one hour.
    pub rate_noise_c_per_h_per_sqrt_h: f64,
    /// Model-error random walk on every node, °C/√h.
    pub node_noise_c_per_sqrt_h: f64,
    /// Steps in the filter-health window (1..=64); as many steps after each
    /// (re-)initialisation settle before the window starts filling.
    pub nis_window: usize,
    /// Initial standard uncertainty of the hot face, °C.
    pub initial_hot_face_sigma_c: f64,
    /// Initial standard uncertainty of the hot-face rate, °C/h.
    pub initial_rate_sigma_c_per_h: f64,
    /// Time constant with which forecasts let the hot-face rate die away,
    /// s (infinite: the current rate held for the whole horizon). The rate
    /// estimate is the recent trend: noisy while the kiln holds, and every
    /// ramp ends; extrapolated for hours it puts the hot face far off.
    pub forecast_rate_damping_s: f64,
}

impl Default for TransientSettings {
    /// 16 cells per layer (fewer for walls of more than 3 layers); the rate
    /// may change by about 100 °C/h in an hour (a burner step or the end of
    /// a ramp); 1 °C/√h of model error; a 20-step health window; the hot
    /// face initially known to ±100 °C and its rate to ±100 °C/h.
    fn default() -> Self {
        TransientSettings {
            cells_per_layer: 16,
            rate_noise_c_per_h_per_sqrt_h: 100.0,
            node_noise_c_per_sqrt_h: 1.0,
            nis_window: 20,
            initial_hot_face_sigma_c: 100.0,
            initial_rate_sigma_c_per_h: 100.0,
            forecast_rate_damping_s: FORECAST_RATE_DAMPING_S,
        }
    }
}

impl TransientSettings {
    fn validate(&self) -> Result<(), TransientError> {
        let non_negative = [
            (
                "rate_noise_c_per_h_per_sqrt_h",
                self.rate_noise_c_per_h_per_sqrt_h,
            ),
            ("node_noise_c_per_sqrt_h", self.node_noise_c_per_sqrt_h),
        ];
        for (what, value) in non_negative {
            if !(value.is_finite() && value >= 0.0) {
                return Err(TransientError::Setting { what, value });
            }
        }
        let positive = [
            ("initial_hot_face_sigma_c", self.initial_hot_face_sigma_c),
            (
                "initial_rate_sigma_c_per_h",
                self.initial_rate_sigma_c_per_h,
            ),
        ];
        let damping = self.forecast_rate_damping_s;
        if damping.is_nan() || damping <= 0.0 {
            return Err(TransientError::Setting {
                what: "forecast_rate_damping_s",
                value: damping,
            });
        }
        for (what, value) in positive {
            if !(value.is_finite() && value > 0.0) {
                return Err(TransientError::Setting { what, value });
            }
        }
        if !(1..=MAX_NIS_WINDOW).contains(&self.nis_window) {
            return Err(TransientError::Setting {
                what: "nis_window",
                value: self.nis_window as f64,
            });
        }
        Ok(())
    }
}

/// What one [`TransientEstimator::step`] did.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepReport {
    /// The filter was reset this step (diverged, or the step could not be
    /// taken) and re-initialised from this step's readings if it could be.
    pub reset: bool,
    /// The filter was (re-)initialised from this step's readings; they were
    /// not assimilated as well.
    pub initialised: bool,
    /// Probe readings assimilated.
    pub innovations: usize,
    /// Readings skipped as invalid: non-finite, σ not positive, or depth
    /// outside the wall.
    pub skipped: usize,
    /// This step's normalised innovation squared, `Σ ν²/S` (χ² with
    /// `innovations` degrees of freedom when the model is right).
    pub nis: f64,
}

/// One node of the estimated profile.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NodeEstimate {
    /// Depth from the hot face, m.
    pub depth_m: f64,
    /// Estimated temperature, °C.
    pub temp_c: f64,
    /// Its standard uncertainty, °C.
    pub sigma_c: f64,
    /// Model rate ∂T/∂t, °C/h.
    pub rate_c_per_h: f64,
}

/// The wall at the end of a forecast.
#[derive(Clone, Debug, PartialEq)]
pub struct ForecastPoint {
    /// Time ahead, h.
    pub horizon_h: f64,
    /// Shell temperature, °C.
    pub shell_c: f64,
    /// Hot-face temperature assumed, °C.
    pub hot_face_c: f64,
    /// Internal interface temperatures, hot face side first, °C.
    pub interface_c: HVec<f64, MAX_LAYERS>,
}

/// A temperature limit whose first crossing a forecast looks for.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Limit {
    /// The shell reaches this temperature, °C.
    ShellC(f64),
    /// Internal interface `index` (0 = between the first two layers)
    /// reaches `limit_c`, °C.
    InterfaceC { index: usize, limit_c: f64 },
}

type Matrix = [[f64; MAX_STATE]; MAX_STATE];

/// The transient zone model: wall, filter state, covariance and health.
#[derive(Clone, Debug)]
pub struct TransientEstimator {
    /// The mean nodal temperatures live in the model; its hot-face rate is
    /// kept equal to `rate_c_per_s`.
    model: WallModel,
    rate_c_per_s: f64,
    /// Covariance of `[T_0 … T_{N−1}, r]`, (°C, °C/s); rows and columns
    /// beyond N + 1 unused.
    p: Box<Matrix>,
    /// Scratch for `(F P)ᵀ`.
    work: Box<Matrix>,
    settings: TransientSettings,
    initialised: bool,
    /// `(NIS, degrees of freedom)` of the last steps with measurements.
    nis_history: Deque<(f64, usize), MAX_NIS_WINDOW>,
    /// Steps with measurements still to go after (re-)initialisation before
    /// their NIS counts towards the health window.
    settling_steps: usize,
}

/// `χ²` quantile of probability 0.999 with `dof` degrees of freedom, by the
/// Wilson–Hilferty cube-root normal approximation
/// `k (1 − 2/(9k) + z √(2/(9k)))³` (Wilson & Hilferty, PNAS 17, 1931;
/// Johnson, Kotz & Balakrishnan, *Continuous Univariate Distributions*
/// vol. 1, §18.5). About 3 % high at 1 degree of freedom, under 0.3 % from
/// 20 on: conservative for a divergence test.
pub fn chi_square_quantile_999(dof: f64) -> f64 {
    let a = 2.0 / (9.0 * dof);
    dof * (1.0 - a + Z_999 * a.sqrt()).powi(3)
}

impl TransientEstimator {
    /// An estimator for a wall of `layers` whose shell loses heat through
    /// `shell`: the zone's surface correlations ([`crate::physics::surface::SurfaceParams`]) or a
    /// measured coefficient ([`ShellBoundary::Convection`]). Not
    /// initialised: the first [`Self::step`] with readings initialises it.
    pub fn new(
        layers: &[TransientLayer<'_>],
        shell: impl Into<ShellBoundary>,
        settings: TransientSettings,
    ) -> Result<Self, TransientError> {
        settings.validate()?;
        let shell = shell.into();
        let contacts = layers.iter().filter(|l| l.contact_m2k_w > 0.0).count();
        let fit = (MAX_NODES - 1).saturating_sub(contacts) / layers.len().max(1);
        let model = WallModel::new(
            layers,
            settings.cells_per_layer.min(fit),
            shell,
            shell.ambient_c(),
        )?;
        Ok(TransientEstimator {
            model,
            rate_c_per_s: 0.0,
            p: Box::new([[0.0; MAX_STATE]; MAX_STATE]),
            work: Box::new([[0.0; MAX_STATE]; MAX_STATE]),
            settings,
            initialised: false,
            nis_history: Deque::new(),
            settling_steps: 0,
        })
    }

    /// The same estimator on a grid graded towards the hot face and the
    /// probe depths `probe_depths_m` for a zone interval of `interval_s`
    /// ([`WallModel::graded`]). Before the first step only.
    pub fn graded(mut self, probe_depths_m: &[f64], interval_s: f64) -> Self {
        if !self.initialised {
            self.model = self.model.graded(probe_depths_m, interval_s);
        }
        self
    }

    /// Whether the filter holds an estimate (after the first readings).
    pub fn is_initialised(&self) -> bool {
        self.initialised
    }

    /// The settings in use.
    pub fn settings(&self) -> &TransientSettings {
        &self.settings
    }

    /// The wall model at the current mean state (grid, nodes, materials).
    pub fn model(&self) -> &WallModel {
        &self.model
    }

    /// Forgets the estimate; the next [`Self::step`] with readings
    /// re-initialises from them.
    pub fn reset(&mut self) {
        self.initialised = false;
        self.nis_history.clear();
        self.rate_c_per_s = 0.0;
    }

    /// Advances by `dt_s` (predict) and assimilates `samples` (update). The
    /// first call with a valid reading initialises instead (its `dt_s` is
    /// ignored). `dt_s = 0` assimilates without predicting.
    ///
    /// Invalid readings are skipped and counted. A step whose prediction
    /// cannot be taken (a gap longer than [`MAX_PREDICT_STEP_S`], the
    /// hot-face trend running out of the temperature range, a non-finite
    /// result) resets the filter and re-initialises from these readings, as
    /// does a diverged health statistic; both say `reset: true`. Errors
    /// (nothing changes): [`TransientError::TimeStep`] for a negative or
    /// non-finite `dt_s`, [`TransientError::Capacity`] for more than
    /// [`MAX_READINGS`] samples.
    pub fn step(
        &mut self,
        dt_s: f64,
        samples: &[ProbeSample],
    ) -> Result<StepReport, TransientError> {
        if !(dt_s.is_finite() && dt_s >= 0.0) {
            return Err(TransientError::TimeStep(dt_s));
        }
        if samples.len() > MAX_READINGS {
            return Err(Full {
                what: "readings in one step",
                limit: MAX_READINGS,
            }
            .into());
        }
        let mut report = StepReport {
            reset: false,
            initialised: false,
            innovations: 0,
            skipped: samples.iter().filter(|s| !self.valid(s)).count(),
            nis: 0.0,
        };
        if !self.initialised {
            report.initialised = self.initialise(samples)?;
            return Ok(report);
        }
        if dt_s > MAX_PREDICT_STEP_S || (dt_s > 0.0 && self.predict(dt_s).is_err()) {
            self.reset();
            report.reset = true;
            report.initialised = self.initialise(samples)?;
            return Ok(report);
        }
        let (count, nis) = self.update(samples);
        report.innovations = count;
        report.nis = nis;
        if count > 0 && self.settling_steps > 0 {
            self.settling_steps -= 1;
        } else if count > 0 {
            // The window is at most MAX_NIS_WINDOW (checked with the
            // settings), so this leaves room for the push.
            if self.nis_history.len() >= self.settings.nis_window || self.nis_history.is_full() {
                self.nis_history.pop_front();
            }
            self.nis_history
                .push_within((nis, count), "steps in the health window")?;
        }
        if self.diverged() || !self.state_finite() {
            self.reset();
            report.reset = true;
            report.initialised = self.initialise(samples)?;
        }
        Ok(report)
    }

    fn valid(&self, s: &ProbeSample) -> bool {
        let l = self.model.thickness_m();
        temperature_ok(s.temp_c)
            && s.depth_m.is_finite()
            && s.depth_m >= -DEPTH_TOLERANCE_M
            && s.depth_m <= l + DEPTH_TOLERANCE_M
            && s.sigma_c.is_finite()
            && s.sigma_c > 0.0
    }

    /// Initial profile through the valid readings (piecewise steady and
    /// layered, see `steady`) and its prior covariance. `false` (still
    /// uninitialised) without a valid reading; an error for more readings
    /// than [`MAX_READINGS`] (which [`Self::step`] refuses first).
    fn initialise(&mut self, samples: &[ProbeSample]) -> Result<bool, TransientError> {
        let l = self.model.thickness_m();
        let valid = samples
            .iter()
            .filter(|s| self.valid(s))
            .map(|s| ProbeSample {
                depth_m: s.depth_m.clamp(0.0, l),
                ..*s
            });
        let points = steady::readings_by_depth(valid)?;
        let Some(&(shallowest_m, _)) = points.first() else {
            return Ok(false);
        };
        let ends = self.model.layer_ends_m();
        let contacts = self.model.contacts_m2k_w();
        let layers = self.model.materials().len();
        let stack = Stack {
            materials: self.model.materials(),
            ends_m: &ends[..layers],
            contacts_m2k_w: &contacts[..layers],
        };
        let n = self.model.node_count();
        let mut t = [0.0; MAX_NODES];
        let shell = self.model.shell();
        let depths = self.model.node_depths_m();
        if !steady::initial_profile(&stack, &points, shell, depths, &mut t[..n]) {
            // The piecewise profile would leave the temperature range (an
            // extrapolation from implausible readings): flat at their mean.
            let mean = points.iter().map(|p| p.1).sum::<f64>() / points.len() as f64;
            t[..n].fill(mean);
        }
        if self.model.set_temperatures(&t[..n]).is_err() {
            return Ok(false);
        }
        self.rate_c_per_s = 0.0;
        self.model.set_hot_face_rate(0.0);
        self.initial_covariance(shallowest_m);
        self.nis_history.clear();
        self.settling_steps = self.settings.nis_window;
        self.initialised = true;
        Ok(true)
    }

    /// `P_ij = σ_p² exp(−|x_i − x_j|/ℓ) + σ_h² φ_i φ_j`, `φ` tapering
    /// linearly from 1 at the hot face to 0 at the shallowest probe; the
    /// rate independent with its own σ.
    fn initial_covariance(&mut self, shallowest_m: f64) {
        let n = self.model.node_count();
        let x = self.model.node_depths_m();
        let ell = INITIAL_CORRELATION_FRACTION * self.model.thickness_m();
        let sigma_h = self.settings.initial_hot_face_sigma_c;
        let taper = |xi: f64| {
            if shallowest_m <= DEPTH_TOLERANCE_M {
                if xi <= 0.0 {
                    1.0
                } else {
                    0.0
                }
            } else {
                (1.0 - xi / shallowest_m).max(0.0)
            }
        };
        for row in self.p.iter_mut() {
            row.fill(0.0);
        }
        for i in 0..n {
            for j in 0..n {
                let smooth = INITIAL_PROFILE_SIGMA_C.powi(2) * (-(x[i] - x[j]).abs() / ell).exp();
                self.p[i][j] = smooth + sigma_h * sigma_h * taper(x[i]) * taper(x[j]);
            }
        }
        let sigma_r = self.settings.initial_rate_sigma_c_per_h / S_PER_H;
        self.p[n][n] = sigma_r * sigma_r;
    }

    /// Process-noise intensities: rate `(°C/s)²/s`, node `°C²/s`.
    fn noise(&self) -> (f64, f64) {
        let q_r = (self.settings.rate_noise_c_per_h_per_sqrt_h / S_PER_H).powi(2) / S_PER_H;
        let q_n = self.settings.node_noise_c_per_sqrt_h.powi(2) / S_PER_H;
        (q_r, q_n)
    }

    /// Predict: mean by one lagged backward-Euler step, covariance by
    /// `F P Fᵀ + Q`. Leaves the state unchanged on error.
    fn predict(&mut self, dt_s: f64) -> Result<(), TransientError> {
        let n = self.model.node_count();
        let dim = n + 1;
        let hot_new = self.model.hot_face_c() + self.rate_c_per_s * dt_s;
        if !temperature_ok(hot_new) {
            return Err(TransientError::Numerical);
        }
        let op = self.model.operator(dt_s, HotFace::Temperature(hot_new))?;
        let mut mean = [0.0; MAX_NODES];
        op.advance(
            self.model.node_temperatures_c(),
            hot_new,
            true,
            &mut mean[..n],
        );
        if !mean[..n].iter().all(|&t| temperature_ok(t)) {
            return Err(TransientError::Numerical);
        }

        // work[j] = F P[j]: row j of (F P)ᵀ, P being symmetric.
        for j in 0..dim {
            transition(&op, dt_s, &self.p[j][..dim], &mut self.work[j][..dim]);
        }
        // Row i of F P Fᵀ = F applied to row i of F P, the column i of work.
        let mut column = [0.0; MAX_STATE];
        for i in 0..dim {
            for (k, c) in column.iter_mut().enumerate().take(dim) {
                *c = self.work[k][i];
            }
            transition(&op, dt_s, &column[..dim], &mut self.p[i][..dim]);
        }
        for i in 0..dim {
            for j in 0..i {
                let s = 0.5 * (self.p[i][j] + self.p[j][i]);
                self.p[i][j] = s;
                self.p[j][i] = s;
            }
        }
        let (q_r, q_n) = self.noise();
        self.p[0][0] += q_r * dt_s.powi(3) / 3.0;
        self.p[0][n] += q_r * dt_s * dt_s / 2.0;
        self.p[n][0] += q_r * dt_s * dt_s / 2.0;
        self.p[n][n] += q_r * dt_s;
        // Node model error, correlated in space: q_n Δt exp(−|x_i − x_j|/ℓ)
        // = q_n Δt e_j / e_i for x_j ≥ x_i, with e_i = exp(−x_i/ℓ).
        let x = self.model.node_depths_m();
        let ell = NODE_NOISE_CORRELATION_FRACTION * self.model.thickness_m();
        let mut e = [0.0; MAX_NODES];
        for (ej, &xj) in e.iter_mut().zip(x) {
            *ej = (-xj / ell).exp();
        }
        for i in 0..n {
            for j in i..n {
                let q = q_n * dt_s * e[j] / e[i];
                self.p[i][j] += q;
                if j != i {
                    self.p[j][i] += q;
                }
            }
        }
        self.model
            .node_temperatures_mut()
            .copy_from_slice(&mean[..n]);
        self.model.set_hot_face_rate(self.rate_c_per_s);
        Ok(())
    }

    /// Sequential scalar updates with every valid reading. Returns the count
    /// assimilated and the summed NIS.
    fn update(&mut self, samples: &[ProbeSample]) -> (usize, f64) {
        let n = self.model.node_count();
        let dim = n + 1;
        let mut count = 0;
        let mut nis = 0.0;
        let mut h = [0.0; MAX_STATE];
        let mut gain = [0.0; MAX_STATE];
        for s in samples {
            if !self.valid(s) {
                continue;
            }
            let Some(w) = self.model.interpolation(s.depth_m) else {
                continue;
            };
            for (k, hk) in h.iter_mut().enumerate().take(dim) {
                *hk = w.iter().map(|&(j, a)| a * self.p[k][j]).sum();
            }
            let hph: f64 = w.iter().map(|&(j, a)| a * h[j]).sum();
            let sigma_c = s.sigma_c.max(MIN_SIGMA_C);
            let innovation_var = hph + sigma_c * sigma_c;
            if !(innovation_var.is_finite() && innovation_var > 0.0) {
                continue;
            }
            let t = self.model.node_temperatures_c();
            let innovation = s.temp_c - w.iter().map(|&(j, a)| a * t[j]).sum::<f64>();
            for k in 0..dim {
                gain[k] = h[k] / innovation_var;
            }
            let nodes = self.model.node_temperatures_mut();
            for k in 0..n {
                nodes[k] += gain[k] * innovation;
            }
            self.rate_c_per_s += gain[n] * innovation;
            // Joseph form for a scalar update.
            for i in 0..dim {
                for j in 0..dim {
                    self.p[i][j] +=
                        -gain[i] * h[j] - h[i] * gain[j] + innovation_var * gain[i] * gain[j];
                }
            }
            count += 1;
            nis += innovation * innovation / innovation_var;
        }
        self.model.set_hot_face_rate(self.rate_c_per_s);
        (count, nis)
    }

    /// Whether the mean, the covariance diagonal and the outputs are all
    /// finite (a guard: a valid wall and valid readings keep them so).
    fn state_finite(&self) -> bool {
        let n = self.model.node_count();
        let nodes_ok = self
            .model
            .node_temperatures_c()
            .iter()
            .all(|&t| temperature_ok(t));
        let p_ok = (0..=n).all(|i| self.p[i][i].is_finite());
        nodes_ok
            && p_ok
            && self.rate_c_per_s.is_finite()
            && self.model.flux_hot_face_w_m2().is_finite()
            && self.model.flux_shell_w_m2().is_finite()
    }

    /// Whether the windowed NIS exceeds its 99.9 % χ² quantile.
    fn diverged(&self) -> bool {
        if self.nis_history.len() < self.settings.nis_window {
            return false;
        }
        let (sum, dof) = self
            .nis_history
            .iter()
            .fold((0.0, 0), |(s, d), &(nis, k)| (s + nis, d + k));
        sum > chi_square_quantile_999(dof as f64)
    }

    /// Mean NIS per step over the health window (near the number of probes
    /// per step when the model is right). NaN while the window is empty:
    /// the first `nis_window` steps with readings after an initialisation
    /// are a settling period that the health check does not judge.
    pub fn nis(&self) -> f64 {
        let len = self.nis_history.len();
        if len == 0 {
            return f64::NAN;
        }
        self.nis_history.iter().map(|&(nis, _)| nis).sum::<f64>() / len as f64
    }

    /// Sum and degrees of freedom of the NIS over the window, and the
    /// divergence threshold for them.
    pub fn nis_window_total(&self) -> (f64, usize, f64) {
        let (sum, dof) = self
            .nis_history
            .iter()
            .fold((0.0, 0), |(s, d), &(nis, k)| (s + nis, d + k));
        (sum, dof, chi_square_quantile_999(dof as f64))
    }

    fn sigma(&self, i: usize) -> f64 {
        self.p[i][i].max(0.0).sqrt()
    }

    /// Standard deviation of the linear combination `Σ g_a x_{i_a}`.
    fn sigma_of(&self, g: &[(usize, f64)]) -> f64 {
        let mut var = 0.0;
        for &(i, a) in g {
            for &(j, b) in g {
                var += a * b * self.p[i][j];
            }
        }
        var.max(0.0).sqrt()
    }

    fn nan_if_uninitialised(&self, value: (f64, f64)) -> (f64, f64) {
        if self.initialised {
            value
        } else {
            (f64::NAN, f64::NAN)
        }
    }

    /// Hot-face temperature and its standard uncertainty, °C (NaN before
    /// initialisation, as every output).
    pub fn hot_face_c(&self) -> (f64, f64) {
        self.nan_if_uninitialised((self.model.hot_face_c(), self.sigma(0)))
    }

    /// Hot-face rate and its standard uncertainty, °C/h.
    pub fn hot_face_rate_c_per_h(&self) -> (f64, f64) {
        let n = self.model.node_count();
        self.nan_if_uninitialised((self.rate_c_per_s * S_PER_H, self.sigma(n) * S_PER_H))
    }

    /// Shell temperature and its standard uncertainty, °C.
    pub fn shell_c(&self) -> (f64, f64) {
        let n = self.model.node_count();
        self.nan_if_uninitialised((self.model.shell_c(), self.sigma(n - 1)))
    }

    /// Gradient of `q(0) = G_0 (T_0 − T_1) + C_0 r` in the state:
    /// `∂/∂T_0 = k(T_0)/Δx + C_0' r`, `∂/∂T_1 = −k(T_1)/Δx` (exact for the
    /// Kirchhoff flux: `d/dT_0 ∫_{T_1}^{T_0} k dT = k(T_0)`), `∂/∂r = C_0`.
    fn hot_face_flux_gradient(&self) -> [(usize, f64); 3] {
        let m = &self.model;
        let t = m.node_temperatures_c();
        let dx = m.segment_dx(0);
        let n = m.node_count();
        [
            (
                0,
                m.segment_k(0, t[0]) / dx + m.capacity_slope(0, t[0]) * self.rate_c_per_s,
            ),
            (1, -m.segment_k(0, t[1]) / dx),
            (n, m.capacity(0, t[0])),
        ]
    }

    /// Heat flux entering at the hot face and its standard uncertainty,
    /// W/m²: `q(0) = F_½ + C_0 r`, the first segment's flux plus what the
    /// hot face's half cell stores at the estimated rate.
    pub fn flux_hot_face_w_m2(&self) -> (f64, f64) {
        let g = self.hot_face_flux_gradient();
        self.nan_if_uninitialised((self.model.flux_hot_face_w_m2(), self.sigma_of(&g)))
    }

    /// Heat flux leaving through the shell and its standard uncertainty,
    /// W/m²: the shell loss at the estimated shell temperature, σ from the
    /// slope of the loss.
    pub fn flux_shell_w_m2(&self) -> (f64, f64) {
        let n = self.model.node_count();
        let slope = self.model.shell().flux_slope_w_m2k(self.model.shell_c());
        self.nan_if_uninitialised((
            self.model.flux_shell_w_m2(),
            self.sigma_of(&[(n - 1, slope)]),
        ))
    }

    /// Power being stored in the wall, `∫ρc_p ∂T/∂t dx = q(0) − q(L)`, and
    /// its standard uncertainty, W/m².
    pub fn stored_w_m2(&self) -> (f64, f64) {
        let n = self.model.node_count();
        let slope = self.model.shell().flux_slope_w_m2k(self.model.shell_c());
        let [a, b, c] = self.hot_face_flux_gradient();
        let g = [a, b, c, (n - 1, -slope)];
        self.nan_if_uninitialised((self.model.stored_w_m2(), self.sigma_of(&g)))
    }

    /// Estimated temperature at `depth_m`, °C (linear between nodes, clamped
    /// to the wall).
    pub fn temperature_at(&self, depth_m: f64) -> f64 {
        self.nan_if_uninitialised((self.model.temperature_at(depth_m), 0.0))
            .0
    }

    /// Model rate ∂T/∂t at `depth_m`, °C/h.
    pub fn rate_c_per_h_at(&self, depth_m: f64) -> f64 {
        self.nan_if_uninitialised((self.model.rate_c_per_s_at(depth_m) * S_PER_H, 0.0))
            .0
    }

    /// Every node: depth, temperature, σ and model rate.
    pub fn profile(&self) -> HVec<NodeEstimate, MAX_NODES> {
        if !self.initialised {
            return HVec::new();
        }
        let rates = self.model.node_rates();
        let t = self.model.node_temperatures_c();
        // Zipped with the rates, a `[f64; MAX_NODES]`: at most MAX_NODES
        // entries, so the collection cannot overflow.
        self.model
            .node_depths_m()
            .iter()
            .zip(t)
            .zip(rates.iter())
            .enumerate()
            .map(|(j, ((&depth_m, &temp_c), &rate))| NodeEstimate {
                depth_m,
                temp_c,
                sigma_c: self.sigma(j),
                rate_c_per_h: rate * S_PER_H,
            })
            .collect()
    }

    /// Internal interface temperatures and their standard uncertainties,
    /// hot face side first, °C.
    pub fn interface_c(&self) -> HVec<(f64, f64), MAX_LAYERS> {
        if !self.initialised {
            return HVec::new();
        }
        let t = self.model.node_temperatures_c();
        // One entry per interface, and the model keeps them in a vector of
        // this capacity ([`WallModel::interface_nodes`]): cannot overflow.
        self.model
            .interface_nodes()
            .iter()
            .map(|&j| (t[j], self.sigma(j)))
            .collect()
    }

    /// The cold side of each internal interface and its standard
    /// uncertainty, °C: `Some` where the interface has a contact
    /// resistance, `None` where the contact is perfect (one temperature).
    pub fn interface_cold_c(&self) -> HVec<Option<(f64, f64)>, MAX_LAYERS> {
        if !self.initialised {
            return HVec::new();
        }
        let t = self.model.node_temperatures_c();
        let m = &self.model;
        // One entry per interface, as in [`Self::interface_c`]: cannot overflow.
        m.interface_nodes()
            .iter()
            .zip(m.interface_cold_nodes())
            .map(|(&hot, &cold)| (cold > hot).then(|| (t[cold], self.sigma(cold))))
            .collect()
    }

    /// Runs the mean state ahead in [`FORECAST_STEP_S`] steps under the
    /// current hot-face trend, calling `visit(t_s, model)` at the start and
    /// after each step until it returns `true` or the horizon is reached.
    /// Returns the time reached and the model there.
    fn run_ahead(
        &self,
        horizon_s: f64,
        hot_face_cap_c: f64,
        mut visit: impl FnMut(f64, &WallModel) -> bool,
    ) -> Option<(f64, WallModel)> {
        if !self.initialised {
            return None;
        }
        let horizon = if horizon_s > 0.0 {
            horizon_s.min(MAX_FORECAST_HORIZON_S)
        } else {
            0.0
        };
        let mut m = self.model.clone();
        let t_hot = m.hot_face_c();
        let cap = if hot_face_cap_c.is_nan() {
            f64::INFINITY
        } else {
            hot_face_cap_c.max(t_hot)
        };
        let floor = t_hot.min(m.shell().ambient_c());
        let mut t = 0.0;
        if visit(t, &m) {
            return Some((t, m));
        }
        while horizon - t > 1e-9 {
            let dt = FORECAST_STEP_S.min(horizon - t);
            let tau = self.settings.forecast_rate_damping_s;
            let hot = (t_hot + damped_rise(self.rate_c_per_s, t + dt, tau))
                .max(floor)
                .min(cap);
            if m.step(dt, hot).is_err() {
                break;
            }
            t += dt;
            if visit(t, &m) {
                break;
            }
        }
        Some((t, m))
    }

    /// The wall `horizon_s` ahead (at most [`MAX_FORECAST_HORIZON_S`]) from
    /// the current mean state, the hot face following its current trend
    /// damped, `T_hot + r τ (1 − e^(−t/τ))` ([`damped_rise`],
    /// [`TransientSettings::forecast_rate_damping_s`]), capped at `hot_face_cap_c` (or at the current hot face
    /// if that is higher; NaN: no cap) and floored at the ambient (or the
    /// current hot face if lower). `None` before initialisation.
    pub fn forecast(&self, horizon_s: f64, hot_face_cap_c: f64) -> Option<ForecastPoint> {
        let (t, m) = self.run_ahead(horizon_s, hot_face_cap_c, |_, _| false)?;
        let nodes = m.node_temperatures_c();
        // One entry per interface, as in [`Self::interface_c`]: cannot overflow.
        let interface_c = m.interface_nodes().iter().map(|&j| nodes[j]).collect();
        Some(ForecastPoint {
            horizon_h: t / S_PER_H,
            shell_c: m.shell_c(),
            hot_face_c: m.hot_face_c(),
            interface_c,
        })
    }

    /// Hours until the forecast (as [`Self::forecast`]) first reaches
    /// `limit`, interpolated within the step; `Some(0.0)` if it is reached
    /// already; `None` if not within `max_horizon_s`, before
    /// initialisation, or for an interface index the wall does not have.
    pub fn time_to_limit_h(
        &self,
        limit: Limit,
        max_horizon_s: f64,
        hot_face_cap_c: f64,
    ) -> Option<f64> {
        let (node, limit_c) = match limit {
            Limit::ShellC(c) => (self.model.node_count() - 1, c),
            Limit::InterfaceC { index, limit_c } => {
                (*self.model.interface_nodes().get(index)?, limit_c)
            }
        };
        let mut previous = (0.0, f64::NAN);
        let mut hit = None;
        self.run_ahead(max_horizon_s, hot_face_cap_c, |t, m| {
            let v = m.node_temperatures_c()[node];
            if v >= limit_c {
                // Linear between the last value below the limit and this one.
                let rose = v.partial_cmp(&previous.1) == Some(core::cmp::Ordering::Greater);
                hit = Some(if t > 0.0 && rose {
                    previous.0 + (limit_c - previous.1) / (v - previous.1) * (t - previous.0)
                } else {
                    t
                });
                return true;
            }
            previous = (t, v);
            false
        })?;
        hit.map(|t_s| t_s / S_PER_H)
    }
}

/// Rise of the hot face `t_s` ahead under a rate `r` that decays with the
/// time constant `tau_s`: `r τ (1 − e^(−t/τ))`, °C (at most `r τ`; `r t`
/// for an infinite `τ`).
pub fn damped_rise(rate_c_per_s: f64, t_s: f64, tau_s: f64) -> f64 {
    if tau_s.is_infinite() {
        return rate_c_per_s * t_s;
    }
    rate_c_per_s * tau_s * -(-t_s / tau_s).exp_m1()
}

/// Applies the transition `F` to `v = [δT_0 … δT_{N−1}, δr]`: the hot face
/// moves by `δr Δt`, the rate is kept, the interior follows the homogeneous
/// step.
fn transition(op: &StepOperator, dt_s: f64, v: &[f64], out: &mut [f64]) {
    let n = v.len() - 1;
    let rate = v[n];
    let hot_new = v[0] + dt_s * rate;
    op.advance(&v[..n], hot_new, false, &mut out[..n]);
    out[n] = rate;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::material::Material;

    #[test]
    fn more_readings_than_a_step_takes_are_refused_with_the_limit() {
        let m = Material::constant(1.3, 2150.0, 1000.0);
        let layer = TransientLayer {
            material: &m,
            thickness_m: 0.3,
            contact_m2k_w: 0.0,
        };
        let shell = ShellBoundary::Convection {
            h_w_m2k: 10.0,
            ambient_c: 20.0,
        };
        let mut est =
            TransientEstimator::new(&[layer], shell, TransientSettings::default()).unwrap();
        let reading = |i: usize| ProbeSample {
            depth_m: 0.3 * i as f64 / (MAX_READINGS + 1) as f64,
            temp_c: 400.0 - i as f64,
            sigma_c: 1.0,
        };
        let many: Vec<ProbeSample> = (0..=MAX_READINGS).map(reading).collect();
        let err = est.step(0.0, &many).unwrap_err();
        assert_eq!(
            err,
            TransientError::Capacity(Full {
                what: "readings in one step",
                limit: MAX_READINGS
            })
        );
        assert_eq!(
            err.to_string(),
            format!("more than {MAX_READINGS} readings in one step (a fixed capacity of wallflux)")
        );
        assert!(!est.is_initialised(), "a refused step changes nothing");
        // Exactly the capacity is taken.
        let report = est.step(0.0, &many[..MAX_READINGS]).unwrap();
        assert!(report.initialised);
    }
}
