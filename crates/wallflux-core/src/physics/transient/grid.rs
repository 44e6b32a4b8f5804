//! Graded node positions: cells sized from the wall and the probe
//! positions, so that the default cell count is accurate without tuning.
//!
//! Within each layer the nodes sit at equal steps of the cumulative cell
//! density `w(x) = 1 + A Σ_f exp(−|x − x_f| / ℓ)` (equidistribution), the
//! focus points `x_f` being the hot face (where the flux is read and the
//! profile is steepest in a heat-up) and every probe depth (where the
//! measurements are interpolated). `ℓ` is a few penetration depths over a
//! zone interval, `√(α Δt)`, and not less than [`MIN_FOCUS_WIDTH_M`]: the
//! cells near a focus are finer where the heat front moves slowly. Layer
//! faces stay nodes, so no cell spans two materials.

/// Peak of the density at a focus point over the background (a cell near a
/// focus is up to `1 + A` times finer), a choice of ours.
pub const FOCUS_GAIN: f64 = 4.0;

/// Width of a focus in penetration depths over one interval.
pub const FOCUS_PENETRATION_DEPTHS: f64 = 3.0;

/// Narrowest focus, m (a choice of ours: the depth uncertainty of a
/// thermocouple is a few millimetres).
pub const MIN_FOCUS_WIDTH_M: f64 = 0.005;

/// Samples of the density per layer for its cumulative integral.
const SAMPLES: usize = 512;

/// Width of a focus, m, for diffusivity `alpha_m2_s` and zone interval
/// `interval_s`.
pub fn focus_width_m(alpha_m2_s: f64, interval_s: f64) -> f64 {
    let w = FOCUS_PENETRATION_DEPTHS * (alpha_m2_s * interval_s).sqrt();
    if w.is_finite() {
        w.max(MIN_FOCUS_WIDTH_M)
    } else {
        MIN_FOCUS_WIDTH_M
    }
}

/// Fills `out` (cells + 1 positions, from `start_m` to `end_m`) with graded
/// node positions for the focus points `focus_m` (any depths; those far
/// outside the layer hardly matter) of width `width_m`.
///
/// The focus points come as an iterator, walked once per density sample,
/// so a caller adding the hot face to its own depths needs no buffer with
/// a capacity that could drop one.
pub fn graded_layer<F>(start_m: f64, end_m: f64, focus_m: F, width_m: f64, out: &mut [f64])
where
    F: Iterator<Item = f64> + Clone,
{
    let cells = out.len().saturating_sub(1);
    if cells == 0 {
        return;
    }
    let len = end_m - start_m;
    let density = |x: f64| {
        1.0 + FOCUS_GAIN
            * focus_m
                .clone()
                .map(|f| (-(x - f).abs() / width_m).exp())
                .sum::<f64>()
    };
    // Cumulative integral by the trapezoid rule on SAMPLES intervals.
    let mut cum = [0.0; SAMPLES + 1];
    let h = len / SAMPLES as f64;
    let mut prev = density(start_m);
    for i in 1..=SAMPLES {
        let d = density(start_m + h * i as f64);
        cum[i] = cum[i - 1] + 0.5 * (prev + d) * h;
        prev = d;
    }
    let total = cum[SAMPLES];
    out[0] = start_m;
    out[cells] = end_m;
    let mut k = 0;
    for (j, x) in out.iter_mut().enumerate().take(cells).skip(1) {
        let target = total * j as f64 / cells as f64;
        while k + 1 < SAMPLES && cum[k + 1] < target {
            k += 1;
        }
        let f = (target - cum[k]) / (cum[k + 1] - cum[k]);
        *x = start_m + h * (k as f64 + f.clamp(0.0, 1.0));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn graded_cells_are_finer_at_the_focus_and_keep_the_faces() {
        let mut x = [0.0; 17];
        graded_layer(0.0, 0.6, [0.0, 0.02].into_iter(), 0.01, &mut x);
        assert_eq!((x[0], x[16]), (0.0, 0.6));
        assert!(x.windows(2).all(|w| w[1] > w[0]), "{x:?}");
        let first = x[1] - x[0];
        let last = x[16] - x[15];
        // Background cells are about 1 + A times the focus cells.
        assert!(first < 0.4 * last, "{first} vs {last}");
        // Without a focus: equal cells.
        graded_layer(0.1, 0.5, core::iter::empty(), 0.01, &mut x);
        for (j, v) in x.iter().enumerate() {
            assert!((v - (0.1 + 0.025 * j as f64)).abs() < 1e-12);
        }
    }
}
