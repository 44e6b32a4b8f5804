//! Weighted least-squares polynomial fits of degree 0..=2, and the ordinary
//! least-squares slope of a time series.
//!
//! Pure arithmetic on values: no IO, no allocation, fixed 3×3 storage.
//!
//! # Method
//!
//! The model is `y ≈ Σ c_i x^i` with weights `w = 1/σ²`; the estimate
//! minimises `χ² = Σ ((y − ŷ)/σ)²`. Two things keep it well conditioned for
//! probe depths of 0…0.5 m and temperatures to 1600 °C (or for times in epoch
//! seconds):
//!
//! 1. `x` is mapped to `u = (x − m)/h`, with `m` the middle and `h` the half
//!    span of the sample, so `u ∈ [−1, 1]` and the columns `1, u, u²` are of
//!    order one.
//! 2. The normal equations are never formed. Each weighted row
//!    `(1, u, u²)/σ | y/σ` is folded into a 3×3 upper-triangular `R` and a
//!    right-hand side `z` by Givens rotations, one row at a time (the
//!    row-updating QR least-squares method; Golub & Van Loan, *Matrix
//!    Computations*, Givens QR and least squares; [`crate::physics::linalg`]).
//!    The condition number is that of the weighted design matrix, not its
//!    square, and no row is stored.
//!
//! The coefficients in `u` are `d = R⁻¹ z`, their covariance
//! `(AᵀWA)⁻¹ = R⁻¹ R⁻ᵀ`. They are mapped back to the coefficients in `x`
//! (`c = T d`, `cov_c = T cov_d Tᵀ`), but values, slopes and their variances
//! are evaluated in `u`, where no cancellation occurs.
//!
//! # Covariance: a-priori σ
//!
//! The covariance is `(AᵀWA)⁻¹` with the σ the caller supplied, **not**
//! rescaled by the reduced χ² (`χ²/dof`). A thermocouple's σ comes from its
//! tolerance class and is known before the fit; with three to eight probes the
//! reduced χ² has one to five degrees of freedom and is too noisy to rescale
//! by. A caller that prefers the a-posteriori estimate multiplies variances by
//! [`PolyFit::reduced_chi2`] (Press et al., *Numerical Recipes*, "General
//! linear least squares", discuss both choices).

use crate::physics::linalg::GivensQr;

/// Highest polynomial degree supported.
pub const MAX_DEGREE: usize = 2;

/// Coefficients of a polynomial of [`MAX_DEGREE`]: the size of every
/// coefficient, gradient and covariance array of a fit.
pub const MAX_COEFFS: usize = MAX_DEGREE + 1;

/// Relative rank tolerance: column `j` of the weighted design matrix counts
/// as independent of the columns before it when the diagonal `R_jj` of its QR
/// factor exceeds this fraction of the column's norm (the sine of its angle to
/// the span of the others). Rounding in `R_jj` is of order 1e-16 times the
/// norm, so 1e-9 is far above noise and flags only layouts whose
/// coefficients would be amplified a billion-fold.
const RANK_TOLERANCE: f64 = 1e-9;

/// Why a fit could not be made.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum FitError {
    /// Fewer points than the degree needs (degree + 1).
    #[error("too few points for the fit: have {have}, need {need}")]
    TooFewPoints { have: usize, need: usize },
    /// Fewer distinct depths than the model needs.
    #[error("too few distinct probe depths: have {have}, need {need}")]
    TooFewDepths { have: usize, need: usize },
    /// The x, y and σ slices differ in length.
    #[error("input lengths differ: {xs} x values, {ys} y values, {sigmas} sigmas")]
    LengthMismatch { xs: usize, ys: usize, sigmas: usize },
    /// Only degrees 0, 1 and 2 are supported.
    #[error("polynomial degree {degree} is not supported (at most {MAX_DEGREE})")]
    UnsupportedDegree { degree: usize },
    /// The points do not determine the coefficients (too few distinct x, or
    /// the distinguishing points carry negligible weight).
    #[error("the points do not determine the fit (singular design)")]
    Singular,
    /// An input or a result is NaN or infinite.
    #[error("an input or result is not a finite number")]
    NonFinite,
    /// A σ is not a finite, strictly positive number (or its inverse overflows).
    #[error("a standard uncertainty must be finite and strictly positive")]
    BadWeight,
    /// The wall thickness is not a finite, strictly positive number.
    #[error("wall thickness must be finite and positive, got {thickness_m} m")]
    BadThickness { thickness_m: f64 },
    /// A probe depth lies outside the wall `[0, L]`.
    #[error("probe depth {depth_m} m lies outside the wall (0 to {thickness_m} m)")]
    DepthOutsideWall { depth_m: f64, thickness_m: f64 },
}

/// A weighted least-squares polynomial `y ≈ c0 + c1 x + c2 x²`.
///
/// `coeffs` and `covariance` are in the caller's `x`; [`value`](Self::value),
/// [`slope`](Self::slope) and the variance methods evaluate an internal
/// centred and scaled form of the same polynomial, which is more accurate far
/// from `x = 0`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PolyFit {
    /// Degree of the polynomial, 0..=2.
    pub degree: usize,
    /// `c0, c1, c2`; those above `degree` are 0.
    pub coeffs: [f64; MAX_COEFFS],
    /// Covariance of `coeffs`, `(AᵀWA)⁻¹` with the a-priori σ (not rescaled
    /// by the reduced χ²; see the module docs). Rows and columns above
    /// `degree` are 0.
    pub covariance: [[f64; MAX_COEFFS]; MAX_COEFFS],
    /// Unweighted RMS residual, `sqrt(Σ r² / n)`, in the units of `y`.
    pub rms: f64,
    /// `χ² = Σ (r/σ)²`.
    pub chi2: f64,
    /// Degrees of freedom, `n − (degree + 1)`.
    pub dof: usize,
    /// The same polynomial in `u = (x − center)/half_span`.
    centered: Centered,
}

/// Polynomial in `u = (x − center) / half_span` with its covariance.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Centered {
    center: f64,
    half_span: f64,
    coeffs: [f64; MAX_COEFFS],
    covariance: [[f64; MAX_COEFFS]; MAX_COEFFS],
}

impl Centered {
    fn u(&self, x: f64) -> f64 {
        (x - self.center) / self.half_span
    }

    fn value(&self, x: f64) -> f64 {
        let u = self.u(x);
        self.coeffs[0] + u * (self.coeffs[1] + u * self.coeffs[2])
    }

    /// Gradient of `y(x)` with respect to the centred coefficients.
    fn value_gradient(&self, x: f64) -> [f64; MAX_COEFFS] {
        let u = self.u(x);
        [1.0, u, u * u]
    }

    /// Gradient of `dy/dx (x)` with respect to the centred coefficients.
    fn slope_gradient(&self, x: f64) -> [f64; MAX_COEFFS] {
        let u = self.u(x);
        [0.0, 1.0 / self.half_span, 2.0 * u / self.half_span]
    }

    /// `gᵀ C h`.
    fn bilinear(&self, g: [f64; MAX_COEFFS], h: [f64; MAX_COEFFS]) -> f64 {
        let mut sum = 0.0;
        for (gi, row) in g.iter().zip(self.covariance.iter()) {
            for (cij, hj) in row.iter().zip(h.iter()) {
                sum += gi * cij * hj;
            }
        }
        sum
    }
}

impl PolyFit {
    /// Fitted `y` at `x`.
    pub fn value(&self, x: f64) -> f64 {
        self.centered.value(x)
    }

    /// Fitted `dy/dx` at `x`: `c1 + 2 c2 x`.
    pub fn slope(&self, x: f64) -> f64 {
        let c = &self.centered;
        (c.coeffs[1] + 2.0 * c.coeffs[2] * c.u(x)) / c.half_span
    }

    /// Fitted `d²y/dx²`: `2 c2` (constant; 0 below degree 2).
    pub fn curvature(&self) -> f64 {
        2.0 * self.coeffs[2]
    }

    /// Variance of the fitted value at `x`, `gᵀ C g` with `g = ∂y(x)/∂c`
    /// (first-order propagation, exact for a linear model). Clamped at 0
    /// against rounding.
    pub fn value_variance(&self, x: f64) -> f64 {
        let g = self.centered.value_gradient(x);
        self.centered.bilinear(g, g).max(0.0)
    }

    /// Variance of the fitted slope `dy/dx` at `x`. Clamped at 0.
    pub fn slope_variance(&self, x: f64) -> f64 {
        let g = self.centered.slope_gradient(x);
        self.centered.bilinear(g, g).max(0.0)
    }

    /// Covariance of the fitted slopes at `x1` and `x2` (needed for the
    /// uncertainty of a difference of slopes, such as an energy balance).
    pub fn slope_covariance(&self, x1: f64, x2: f64) -> f64 {
        let c = &self.centered;
        c.bilinear(c.slope_gradient(x1), c.slope_gradient(x2))
    }

    /// Reduced χ², `χ²/dof`: about 1 when the σ are right and the model fits;
    /// `None` when the fit has no degrees of freedom. Multiply a variance by
    /// it for the a-posteriori (scatter-based) estimate.
    pub fn reduced_chi2(&self) -> Option<f64> {
        (self.dof > 0).then(|| self.chi2 / self.dof as f64)
    }
}

/// Weighted least-squares polynomial fit `y ≈ Σ c_i x^i` of `degree` 0..=2,
/// weights `1/σ²`, over parallel slices.
///
/// See [`fit_points`] for the method and the errors; in addition the slices
/// must have equal lengths ([`FitError::LengthMismatch`]).
pub fn fit_polynomial(
    xs: &[f64],
    ys: &[f64],
    sigmas: &[f64],
    degree: usize,
) -> Result<PolyFit, FitError> {
    if xs.len() != ys.len() || xs.len() != sigmas.len() {
        return Err(FitError::LengthMismatch {
            xs: xs.len(),
            ys: ys.len(),
            sigmas: sigmas.len(),
        });
    }
    let points = xs
        .iter()
        .zip(ys.iter())
        .zip(sigmas.iter())
        .map(|((&x, &y), &s)| (x, y, s));
    fit_points(points, degree)
}

/// Weighted least-squares polynomial fit over `(x, y, σ)` points; the
/// iterator is walked three times (range, factorisation, residuals), so any
/// number of points is fitted without allocating.
///
/// Errors: [`FitError::UnsupportedDegree`] above 2;
/// [`FitError::NonFinite`] for a NaN or infinite `x` or `y`, or a result that
/// overflows; [`FitError::BadWeight`] for a σ that is not finite and
/// positive; [`FitError::TooFewPoints`] below `degree + 1` points;
/// [`FitError::Singular`] when the points do not determine the coefficients
/// (for example all at one `x` for degree 1, or two distinct `x` for degree 2).
pub fn fit_points<I>(points: I, degree: usize) -> Result<PolyFit, FitError>
where
    I: IntoIterator<Item = (f64, f64, f64)>,
    I::IntoIter: Clone,
{
    if degree > MAX_DEGREE {
        return Err(FitError::UnsupportedDegree { degree });
    }
    let p = degree + 1;
    let points = points.into_iter();

    // Pass 1: validate, count, find the x range.
    let mut n = 0_usize;
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for (x, y, sigma) in points.clone() {
        if !x.is_finite() || !y.is_finite() {
            return Err(FitError::NonFinite);
        }
        if !(sigma.is_finite() && sigma > 0.0 && (1.0 / sigma).is_finite()) {
            return Err(FitError::BadWeight);
        }
        n += 1;
        lo = lo.min(x);
        hi = hi.max(x);
    }
    if n < p {
        return Err(FitError::TooFewPoints { have: n, need: p });
    }
    let (center, half_span) = if degree == 0 {
        (0.0, 1.0)
    } else {
        // Halve before subtracting so that the span cannot overflow.
        let half = 0.5 * hi - 0.5 * lo;
        if !(half > 0.0 && half.is_finite()) {
            return Err(FitError::Singular);
        }
        (lo + half, half)
    };

    // Pass 2: fold each weighted row into R and z by Givens rotations.
    let mut qr = GivensQr::<MAX_COEFFS>::new(p);
    for (x, y, sigma) in points.clone() {
        let sqrt_w = 1.0 / sigma;
        let u = (x - center) / half_span;
        qr.fold([sqrt_w, sqrt_w * u, sqrt_w * u * u], sqrt_w * y);
    }
    if !qr.columns_independent(RANK_TOLERANCE) {
        return Err(FitError::Singular);
    }
    // d = R⁻¹ z; cov_d = R⁻¹ R⁻ᵀ.
    let d = qr.solve();
    let cov_d = qr.covariance();

    // Back to x: y = d0 + d1 u + d2 u², u = (x − m)/h, so
    // c0 = d0 − d1 m/h + d2 m²/h², c1 = d1/h − 2 d2 m/h², c2 = d2/h².
    let (m, h) = (center, half_span);
    let mut t = [[0.0_f64; MAX_COEFFS]; MAX_COEFFS];
    t[0] = [1.0, -m / h, m * m / (h * h)];
    t[1] = [0.0, 1.0 / h, -2.0 * m / (h * h)];
    t[2] = [0.0, 0.0, 1.0 / (h * h)];
    let mut coeffs = [0.0_f64; MAX_COEFFS];
    let mut covariance = [[0.0_f64; MAX_COEFFS]; MAX_COEFFS];
    for i in 0..p {
        coeffs[i] = (0..p).map(|k| t[i][k] * d[k]).sum();
        for j in 0..p {
            covariance[i][j] = (0..p)
                .map(|k| t[i][k] * (0..p).map(|l| cov_d[k][l] * t[j][l]).sum::<f64>())
                .sum();
        }
    }

    let centered = Centered {
        center,
        half_span,
        coeffs: d,
        covariance: cov_d,
    };

    // Pass 3: residuals, evaluated directly rather than taken from the QR
    // remainder (which would lose the digits of a small χ²).
    let mut chi2 = 0.0;
    let mut sum_r2 = 0.0;
    for (x, y, sigma) in points {
        let res = y - centered.value(x);
        chi2 += (res / sigma) * (res / sigma);
        sum_r2 += res * res;
    }
    let rms = (sum_r2 / n as f64).sqrt();

    let all_finite = coeffs.iter().all(|c| c.is_finite())
        && covariance.iter().flatten().all(|c| c.is_finite())
        && d.iter().all(|c| c.is_finite())
        && cov_d.iter().flatten().all(|c| c.is_finite())
        && chi2.is_finite()
        && rms.is_finite();
    if !all_finite {
        return Err(FitError::NonFinite);
    }

    Ok(PolyFit {
        degree,
        coeffs,
        covariance,
        rms,
        chi2,
        dof: n - p,
        centered,
    })
}

/// Ordinary least-squares slope of `values` against `times` (e.g. °C per
/// second for times in seconds) with its standard error.
///
/// `b = S_tv / S_tt`, `se(b) = sqrt( Σ r² / (n − 2) / S_tt )`, with
/// `S_tt = Σ (t − t̄)²` and `S_tv = Σ (t − t̄)(v − v̄)` (simple linear
/// regression, e.g. Montgomery & Runger, *Applied Statistics and Probability
/// for Engineers*). Order does not matter, so a ring buffer's storage order
/// serves. With exactly two points the slope is exact but its standard error
/// is undefined: it is returned as `f64::INFINITY` ("unknown"), so a
/// significance test `|b| > 2 se` says no.
///
/// `None` when the slices differ in length, hold fewer than 2 points, contain
/// a NaN or infinity, or all times are equal.
pub fn linear_slope(times: &[f64], values: &[f64]) -> Option<(f64, f64)> {
    if times.len() != values.len() {
        return None;
    }
    linear_slope_pairs(times.iter().copied().zip(values.iter().copied()))
}

/// [`linear_slope`] over `(time, value)` pairs (e.g. a `heapless::HistoryBuf`
/// of readings); the iterator is walked three times.
pub fn linear_slope_pairs<I>(pairs: I) -> Option<(f64, f64)>
where
    I: IntoIterator<Item = (f64, f64)>,
    I::IntoIter: Clone,
{
    let pairs = pairs.into_iter();
    // Shift by the first point before averaging, so epoch-second times keep
    // their digits.
    let (t0, v0) = pairs.clone().next()?;
    let mut n = 0_usize;
    let (mut sum_t, mut sum_v) = (0.0, 0.0);
    for (t, v) in pairs.clone() {
        if !t.is_finite() || !v.is_finite() {
            return None;
        }
        n += 1;
        sum_t += t - t0;
        sum_v += v - v0;
    }
    if n < 2 {
        return None;
    }
    let nf = n as f64;
    let (t_mean, v_mean) = (t0 + sum_t / nf, v0 + sum_v / nf);
    let (mut s_tt, mut s_tv) = (0.0, 0.0);
    for (t, v) in pairs.clone() {
        let dt = t - t_mean;
        s_tt += dt * dt;
        s_tv += dt * (v - v_mean);
    }
    if !(s_tt > 0.0 && s_tt.is_finite()) {
        return None;
    }
    let slope = s_tv / s_tt;
    if !slope.is_finite() {
        return None;
    }
    if n == 2 {
        return Some((slope, f64::INFINITY));
    }
    let ss_res: f64 = pairs
        .map(|(t, v)| {
            let r = v - v_mean - slope * (t - t_mean);
            r * r
        })
        .sum();
    let std_err = (ss_res / (nf - 2.0) / s_tt).sqrt();
    std_err.is_finite().then_some((slope, std_err))
}

/// Deterministic random numbers for tests: SplitMix64 (Steele, Lea & Flood,
/// "Fast splittable pseudorandom number generators", OOPSLA 2014) and the
/// Box–Muller transform (Box & Muller, Ann. Math. Statist. 29, 1958).
#[cfg(test)]
pub(crate) mod test_rng {
    pub(crate) struct SplitMix64(u64);

    impl SplitMix64 {
        pub(crate) fn new(state: u64) -> Self {
            SplitMix64(state)
        }

        pub(crate) fn next_u64(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }

        /// Uniform in [0, 1).
        pub(crate) fn uniform(&mut self) -> f64 {
            (self.next_u64() >> 11) as f64 * (1.0 / (1_u64 << 53) as f64)
        }

        /// Standard normal deviate (Box–Muller, cosine branch).
        pub(crate) fn normal(&mut self) -> f64 {
            let u1 = 1.0 - self.uniform(); // (0, 1], keeps ln finite
            let u2 = self.uniform();
            (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
        }
    }

    /// Sample mean and standard deviation (n − 1 denominator).
    pub(crate) fn mean_std(xs: &[f64]) -> (f64, f64) {
        let n = xs.len() as f64;
        let mean = xs.iter().sum::<f64>() / n;
        let var = xs.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0);
        (mean, var.sqrt())
    }
}

#[cfg(test)]
mod tests {
    use super::test_rng::{mean_std, SplitMix64};
    use super::*;

    fn close(got: f64, want: f64, rel: f64) -> bool {
        (got - want).abs() <= rel * want.abs().max(f64::MIN_POSITIVE)
    }

    /// Noise-free samples of an exact quadratic are reproduced by any layout
    /// that determines it (least squares is exact on data in the model's
    /// span). T = 1400 − 3500 x + 2200 x² is a plausible lining profile.
    #[test]
    fn exact_quadratic_recovered_on_many_layouts() {
        let c = [1400.0, -3500.0, 2200.0];
        let f = |x: f64| c[0] + c[1] * x + c[2] * x * x;
        let uniform64: [f64; 64] = core::array::from_fn(|i| 0.5 * i as f64 / 63.0);
        let layouts: [&[f64]; 7] = [
            &[0.0, 0.115, 0.23],
            &[0.23, 0.0, 0.115],             // order does not matter
            &[0.0, 0.001, 0.002, 0.2],       // clustered at the hot face
            &[0.01, 0.013, 0.09, 0.3, 0.45], // irregular
            &[0.20, 0.225, 0.229, 0.23],     // clustered at the shell
            &[0.05, 0.05, 0.1, 0.1, 0.15],   // repeated depths
            &uniform64,
        ];
        let mut rng = SplitMix64::new(7);
        for xs in layouts {
            let ys: heapless::Vec<f64, 64> = xs.iter().map(|&x| f(x)).collect();
            // Weights do not matter for exact data: use arbitrary σ in 0.5..5.
            let sig: heapless::Vec<f64, 64> =
                xs.iter().map(|_| 0.5 + 4.5 * rng.uniform()).collect();
            let fit = fit_polynomial(xs, &ys, &sig, 2).unwrap();
            for (i, (&got, &want)) in fit.coeffs.iter().zip(c.iter()).enumerate() {
                assert!(close(got, want, 1e-9), "{xs:?}: c{i} = {got}");
            }
            assert!(
                fit.rms < 1e-9 && fit.chi2 < 1e-15,
                "{xs:?}: rms {}",
                fit.rms
            );
            assert_eq!(fit.dof, xs.len() - 3);
            assert!(close(fit.curvature(), 2.0 * c[2], 1e-9));
            assert!(close(fit.slope(0.0), c[1], 1e-9));
            assert!(close(fit.value(0.5), f(0.5), 1e-12));
        }
    }

    /// Centring and scaling keep a fit far from x = 0 accurate: times in
    /// seconds near 1e9 (epoch) over one hour. Without centring the normal
    /// matrix would have a condition number near 1e25 and no digit would
    /// survive. Exact data y = 20 + 0.01 τ − 2e-6 τ², τ = t − 1.7e9.
    #[test]
    fn fit_far_from_origin_keeps_its_digits() {
        let t_ref = 1.7e9;
        let g = |tau: f64| 20.0 + 0.01 * tau - 2e-6 * tau * tau;
        let ts: [f64; 7] = core::array::from_fn(|i| t_ref + 600.0 * i as f64);
        let ys: [f64; 7] = core::array::from_fn(|i| g(600.0 * i as f64));
        let fit = fit_polynomial(&ts, &ys, &[1.0; 7], 2).unwrap();
        for tau in [0.0, 1234.5, 3600.0] {
            // Rounding of t itself (1.7e9 carries ~2e-7 s) bounds the agreement.
            assert!((fit.value(t_ref + tau) - g(tau)).abs() < 1e-7, "tau {tau}");
            assert!((fit.slope(t_ref + tau) - (0.01 - 4e-6 * tau)).abs() < 1e-10);
        }
        assert!(close(fit.curvature(), -4e-6, 1e-6));
    }

    /// Cross-check against a general-purpose reference library: numpy 2.4.6,
    /// `numpy.polyfit(x, y, 2, w=1/σ, cov='unscaled')` (unscaled = (AᵀWA)⁻¹,
    /// the a-priori covariance), on this six-probe data set. Values printed by
    /// numpy to 17 significant digits.
    #[test]
    fn weighted_fit_matches_numpy_polyfit() {
        let x = [0.0, 0.035, 0.08, 0.15, 0.19, 0.23];
        let y = [1187.3, 1050.2, 902.8, 640.1, 520.7, 377.9];
        let s = [1.5, 2.0, 1.0, 3.0, 2.5, 1.2];
        let fit = fit_polynomial(&x, &y, &s, 2).unwrap();
        // numpy order is (c2, c1, c0).
        let want_c = [1185.3301089380693, -3591.346075558268, 353.9943123493632];
        let want_cov = [
            [1.9282723583518202, -33.14451040786354, 109.56045751946739],
            [-33.14451040786354, 879.9588368179869, -3323.7259557959896],
            [109.56045751946739, -3323.7259557959896, 13358.108109054143],
        ];
        for (i, (&got, &want)) in fit.coeffs.iter().zip(want_c.iter()).enumerate() {
            assert!(close(got, want, 1e-10), "c{i} {got}");
        }
        for (i, (got_row, want_row)) in fit.covariance.iter().zip(want_cov.iter()).enumerate() {
            for (j, (&got, &want)) in got_row.iter().zip(want_row.iter()).enumerate() {
                assert!(close(got, want, 1e-9), "cov[{i}][{j}] {got}");
            }
        }
        // χ² and RMS from the numpy residuals.
        assert!(
            close(fit.chi2, 59.641041323775625, 1e-9),
            "chi2 {}",
            fit.chi2
        );
        assert!(close(fit.rms, 7.550709127134348, 1e-9), "rms {}", fit.rms);
        assert_eq!(fit.dof, 3);
        assert!(close(
            fit.reduced_chi2().unwrap(),
            59.641041323775625 / 3.0,
            1e-9
        ));
        // Var of the value at x = 0 is the c0 variance; the centred and the
        // original representations must agree.
        assert!(close(fit.value_variance(0.0), want_cov[0][0], 1e-9));
        let g = [1.0, 0.17, 0.17 * 0.17];
        let mut v = 0.0;
        for i in 0..3 {
            for j in 0..3 {
                v += g[i] * fit.covariance[i][j] * g[j];
            }
        }
        assert!(close(fit.value_variance(0.17), v, 1e-9));

        // Degree 1 on the same data: numpy polyfit(x, y, 1, w=1/σ, cov='unscaled').
        let lin = fit_polynomial(&x, &y, &s, 1).unwrap();
        assert!(close(lin.coeffs[0], 1182.4267203366542, 1e-10));
        assert!(close(lin.coeffs[1], -3503.2662311256317, 1e-10));
        assert!(close(lin.covariance[0][0], 1.0296800012695295, 1e-9));
        assert!(close(lin.covariance[0][1], -5.883993168935292, 1e-9));
        assert!(close(lin.covariance[1][1], 52.958924925958556, 1e-9));
        assert!(close(lin.slope_variance(0.3), 52.958924925958556, 1e-9));
        assert_eq!(lin.coeffs[2], 0.0);
    }

    /// With equal σ the weights cancel from the estimate: the fit equals the
    /// ordinary least-squares fit (numpy 2.4.6 `numpy.polyfit(x, y, 2)`,
    /// no weights), and scaling every σ by 3 leaves the coefficients, scales
    /// the covariance by 9 and χ² by 1/9 (definition of (AᵀWA)⁻¹ and χ²).
    #[test]
    fn equal_sigmas_give_ordinary_least_squares() {
        let x = [0.0, 0.035, 0.08, 0.15, 0.19, 0.23];
        let y = [1187.3, 1050.2, 902.8, 640.1, 520.7, 377.9];
        let one = fit_polynomial(&x, &y, &[1.0; 6], 2).unwrap();
        let three = fit_polynomial(&x, &y, &[3.0; 6], 2).unwrap();
        let ols = [1185.261759760134, -3704.812658972877, 883.3251864480126];
        for (i, &want) in ols.iter().enumerate() {
            assert!(close(one.coeffs[i], want, 1e-10), "c{i} {}", one.coeffs[i]);
            assert!(close(three.coeffs[i], one.coeffs[i], 1e-12));
        }
        let pairs = three
            .covariance
            .iter()
            .flatten()
            .zip(one.covariance.iter().flatten());
        for (&c3, &c1) in pairs {
            assert!(close(c3, 9.0 * c1, 1e-10), "{c3} vs 9 × {c1}");
        }
        assert!(close(three.chi2, one.chi2 / 9.0, 1e-10));
        assert!(close(three.rms, one.rms, 1e-12));
    }

    /// A point with σ = 1e6 °C has weight 1e-12 of the others: moving it by
    /// 100 °C shifts the fit by ~1e-10 °C (weight × residual × leverage), while
    /// the same move at σ = 1 °C shifts the hot face by degrees. Both halves
    /// guard the weighting.
    #[test]
    fn a_point_with_huge_sigma_barely_counts() {
        let x = [0.0, 0.05, 0.1, 0.15, 0.23];
        let y = [1190.0, 1010.0, 850.0, 700.0, 480.0];
        let base = fit_polynomial(&x[..4], &y[..4], &[1.0; 4], 2).unwrap();
        let y_moved = [1190.0, 1010.0, 850.0, 700.0, base.value(0.23) + 100.0];
        let weak = fit_polynomial(&x, &y_moved, &[1.0, 1.0, 1.0, 1.0, 1e6], 2).unwrap();
        let strong = fit_polynomial(&x, &y_moved, &[1.0; 5], 2).unwrap();
        assert!((weak.value(0.0) - base.value(0.0)).abs() < 1e-6);
        assert!((weak.slope(0.23) - base.slope(0.23)).abs() < 1e-4);
        assert!((strong.value(0.0) - base.value(0.0)).abs() > 1.0);
    }

    /// Degree 0 is the weighted mean Σ(y/σ²)/Σ(1/σ²) with variance 1/Σ(1/σ²)
    /// (Bevington & Robinson, *Data Reduction and Error Analysis*, weighted
    /// mean). Here Σw = 1 + 1/4 + 1/16 = 1.3125, Σwy = 10 + 3 + 0.875 = 13.875.
    #[test]
    fn degree_zero_is_the_weighted_mean() {
        let fit =
            fit_polynomial(&[0.1, 0.1, 0.2], &[10.0, 12.0, 14.0], &[1.0, 2.0, 4.0], 0).unwrap();
        assert!(close(fit.coeffs[0], 13.875 / 1.3125, 1e-14));
        assert!(close(fit.value_variance(0.7), 1.0 / 1.3125, 1e-14));
        assert_eq!(fit.slope(0.3), 0.0);
        assert_eq!(fit.dof, 2);
    }

    /// Monte-Carlo check of the a-priori covariance: with Gaussian noise of
    /// the stated σ, the sample spread of the fitted hot-face value and
    /// shell slope over 5000 noisy data sets must match sqrt(variance). The
    /// relative standard error of a sample standard deviation is about
    /// 1/sqrt(2N) = 1 % at N = 5000, so 5 % is a 5-sigma band, yet a
    /// covariance off by a factor (e.g. σ instead of σ²) fails it. E[χ²] = dof
    /// (χ² distribution) is checked to 5 % as well (its standard error is
    /// sqrt(2·dof/N) ≈ 0.9 % of the mean here).
    #[test]
    fn covariance_matches_monte_carlo_scatter() {
        let x = [0.0, 0.04, 0.09, 0.16, 0.23];
        let s = [2.0, 1.5, 3.0, 2.0, 1.0];
        let truth = |x: f64| 1250.0 - 4200.0 * x + 1800.0 * x * x;
        let mut rng = SplitMix64::new(0x5EED_5EED);
        const N: usize = 5000;
        let mut hot = [0.0; N];
        let mut slope_shell = [0.0; N];
        let mut chi2_sum = 0.0;
        let mut reference = None;
        for trial in 0..N {
            let y: [f64; 5] = core::array::from_fn(|i| truth(x[i]) + s[i] * rng.normal());
            let fit = fit_polynomial(&x, &y, &s, 2).unwrap();
            hot[trial] = fit.value(0.0);
            slope_shell[trial] = fit.slope(0.23);
            chi2_sum += fit.chi2;
            reference.get_or_insert(fit); // covariance does not depend on y
        }
        let fit = reference.unwrap();
        let (hot_mean, hot_std) = mean_std(&hot);
        let (_, slope_std) = mean_std(&slope_shell);
        let sd_hot = fit.value_variance(0.0).sqrt();
        let sd_slope = fit.slope_variance(0.23).sqrt();
        assert!(close(hot_std, sd_hot, 0.05), "MC {hot_std} vs {sd_hot}");
        assert!(
            close(slope_std, sd_slope, 0.05),
            "MC {slope_std} vs {sd_slope}"
        );
        // Unbiased: the mean is within 5 standard errors of the truth.
        assert!((hot_mean - 1250.0).abs() < 5.0 * sd_hot / (N as f64).sqrt());
        assert!(
            close(chi2_sum / N as f64, 2.0, 0.05),
            "mean chi2 {}",
            chi2_sum / N as f64
        );
    }

    #[test]
    fn bad_inputs_are_typed_errors() {
        use FitError::*;
        let f = fit_polynomial;
        assert_eq!(f(&[], &[], &[], 1), Err(TooFewPoints { have: 0, need: 2 }));
        assert_eq!(
            f(&[0.1, 0.2], &[1.0, 2.0], &[1.0, 1.0], 2),
            Err(TooFewPoints { have: 2, need: 3 })
        );
        assert_eq!(
            f(&[0.1], &[1.0, 2.0], &[1.0], 1),
            Err(LengthMismatch {
                xs: 1,
                ys: 2,
                sigmas: 1
            })
        );
        assert_eq!(
            f(&[0.1; 5], &[1.0; 5], &[1.0; 5], 3),
            Err(UnsupportedDegree { degree: 3 })
        );
        assert_eq!(
            f(&[0.1, f64::NAN], &[1.0, 2.0], &[1.0; 2], 1),
            Err(NonFinite)
        );
        assert_eq!(
            f(&[0.1, 0.2], &[1.0, f64::INFINITY], &[1.0; 2], 1),
            Err(NonFinite)
        );
        for bad in [0.0, -1.0, f64::NAN, f64::INFINITY, 1e-320] {
            assert_eq!(
                f(&[0.1, 0.2], &[1.0, 2.0], &[1.0, bad], 1),
                Err(BadWeight),
                "σ {bad}"
            );
        }
        // All at one depth: no slope; two distinct depths: no curvature.
        assert_eq!(
            f(&[0.1; 4], &[1.0, 2.0, 3.0, 4.0], &[1.0; 4], 1),
            Err(Singular)
        );
        assert_eq!(
            f(&[0.1, 0.1, 0.2, 0.2], &[1.0, 2.0, 3.0, 4.0], &[1.0; 4], 2),
            Err(Singular)
        );
        // Overflowing results are reported, not returned.
        assert_eq!(
            f(
                &[0.0, 1e-300, 2e-300],
                &[1e300, -1e300, 1e300],
                &[1.0; 3],
                2
            ),
            Err(NonFinite)
        );
    }

    /// Arbitrary finite inputs never panic, and every Ok result is finite.
    #[test]
    fn garbage_never_panics() {
        let mut rng = SplitMix64::new(99);
        let pick = |rng: &mut SplitMix64| {
            let specials = [
                0.0,
                -0.0,
                1e-308,
                1e308,
                -1e308,
                f64::NAN,
                f64::INFINITY,
                5e-324,
            ];
            if rng.uniform() < 0.2 {
                specials[(rng.next_u64() % specials.len() as u64) as usize]
            } else {
                (rng.uniform() - 0.5) * 10f64.powi((rng.next_u64() % 40) as i32 - 20)
            }
        };
        for _ in 0..20_000 {
            let n = (rng.next_u64() % 6) as usize;
            let mut x = [0.0; 6];
            let mut y = [0.0; 6];
            let mut s = [0.0; 6];
            for i in 0..n {
                x[i] = pick(&mut rng);
                y[i] = pick(&mut rng);
                s[i] = pick(&mut rng).abs();
            }
            let degree = (rng.next_u64() % 4) as usize;
            if let Ok(fit) = fit_polynomial(&x[..n], &y[..n], &s[..n], degree) {
                assert!(fit.coeffs.iter().all(|c| c.is_finite()));
                assert!(fit.chi2.is_finite() && fit.rms.is_finite());
            }
            let _ = linear_slope(&x[..n], &y[..n]);
        }
    }

    /// An exact line gives its slope and zero standard error.
    #[test]
    fn linear_slope_of_an_exact_line() {
        let t = [0.0, 60.0, 120.0, 300.0, 600.0];
        let v: [f64; 5] = core::array::from_fn(|i| 25.0 + 0.015 * t[i]);
        let (b, se) = linear_slope(&t, &v).unwrap();
        assert!(close(b, 0.015, 1e-12));
        assert!(se < 1e-12);
        // The same in epoch seconds: shifting time changes nothing.
        let te: [f64; 5] = core::array::from_fn(|i| 1.7e9 + t[i]);
        let (be, _) = linear_slope(&te, &v).unwrap();
        assert!(close(be, 0.015, 1e-9));
    }

    /// Hand computation, t = 0..4, v = 1, 3, 2, 5, 4: t̄ = 2, v̄ = 3,
    /// S_tt = 10, S_tv = 4 + 0 + 0 + 2 + 2 = 8, b = 0.8; fitted 1.4, 2.2, 3.0,
    /// 3.8, 4.6, residuals −0.4, 0.8, −1.0, 1.2, −0.6, Σr² = 3.6,
    /// s² = 3.6/3 = 1.2, se = sqrt(1.2/10) = 0.3464101615 (scipy 1.17.1
    /// `scipy.stats.linregress` agrees: 0.34641016151377546).
    #[test]
    fn linear_slope_standard_error_by_hand() {
        let (b, se) = linear_slope(&[0.0, 1.0, 2.0, 3.0, 4.0], &[1.0, 3.0, 2.0, 5.0, 4.0]).unwrap();
        assert!(close(b, 0.8, 1e-14));
        assert!(close(se, 0.12_f64.sqrt(), 1e-14));
    }

    /// Anscombe's quartet, set I (Anscombe, "Graphs in statistical analysis",
    /// Am. Stat. 27, 1973): slope 0.500, standard error 0.118 as published
    /// (from memory); scipy 1.17.1 `linregress` gives 0.5000909090909091 and
    /// 0.11790550059563408.
    #[test]
    fn linear_slope_on_anscombe_one() {
        let x = [10.0, 8.0, 13.0, 9.0, 11.0, 14.0, 6.0, 4.0, 12.0, 7.0, 5.0];
        let y = [
            8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68,
        ];
        let (b, se) = linear_slope(&x, &y).unwrap();
        assert!(close(b, 0.5000909090909091, 1e-12));
        assert!(close(se, 0.11790550059563408, 1e-12));
        // Pairs form, storage order scrambled: same answer.
        let pairs = [
            (x[5], y[5]),
            (x[0], y[0]),
            (x[10], y[10]),
            (x[1], y[1]),
            (x[2], y[2]),
            (x[3], y[3]),
            (x[4], y[4]),
            (x[6], y[6]),
            (x[7], y[7]),
            (x[8], y[8]),
            (x[9], y[9]),
        ];
        let (bp, sep) = linear_slope_pairs(pairs).unwrap();
        assert!(close(bp, b, 1e-12) && close(sep, se, 1e-12));
    }

    #[test]
    fn linear_slope_degenerate_cases() {
        assert_eq!(linear_slope(&[], &[]), None);
        assert_eq!(linear_slope(&[1.0], &[2.0]), None);
        assert_eq!(linear_slope(&[1.0, 1.0, 1.0], &[2.0, 3.0, 4.0]), None);
        assert_eq!(linear_slope(&[1.0, 2.0], &[2.0]), None);
        assert_eq!(linear_slope(&[1.0, f64::NAN], &[2.0, 3.0]), None);
        // Two points: exact slope, unknown (infinite) standard error.
        assert_eq!(
            linear_slope(&[10.0, 20.0], &[100.0, 130.0]),
            Some((3.0, f64::INFINITY))
        );
    }
}
