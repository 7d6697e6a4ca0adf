//! Removal of narrow spectral lines (mains pickup, resonances) from a record by harmonic
//! regression, so that the autocorrelation and equipartition methods see only thermal motion.
//!
//! A sinusoid a cos(w j) + b sin(w j) is fitted by least squares at the frequency that maximises
//! the record's periodogram near a detected peak, and subtracted. This is the classical
//! regression treatment of deterministic lines in a stationary background (Priestley, Spectral
//! Analysis and Time Series (1981), sec. 6.1 (citation from memory, unverified)); removing a line
//! also removes a fraction of about 2/N of the background variance, which is negligible.

use argmin::core::{CostFunction, Executor};
use argmin::solver::brent::BrentOpt;
use std::f64::consts::PI;

/// A fitted sinusoid.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpectralLine {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitude sqrt(a^2 + b^2), signal units.
    pub amplitude: f64,
    /// Cosine and sine coefficients, signal units.
    pub cos_coefficient: f64,
    pub sin_coefficient: f64,
}

/// Number of interleaved phasors in `harmonic_sums`.
const LANES: usize = 4;
/// Samples between exact recomputations of the phasors (a multiple of `LANES`).
const RESYNC: usize = 1024;

/// sum_j y_j cos(w j), sum_j y_j sin(w j), and the three sums of cos^2, sin^2, cos sin.
///
/// The phasor exp(i w j) advances by rotation and is recomputed exactly every 1024 samples, so
/// rounding cannot accumulate. Four interleaved phasors (samples j = 4 i + r, each rotated by
/// 4 w) break the dependency chain of a single rotation, which otherwise bounds the speed of
/// this loop; the sums agree with the single-phasor ones to rounding (common practice).
///
/// Plain multiply-adds on purpose: without the `fma` target feature (the default x86-64
/// target) `f64::mul_add` is a call into the runtime's fma routine, several times slower than
/// a multiply and an add and a barrier to vectorisation in this, the hottest loop of line
/// removal.
#[allow(clippy::suboptimal_flops)]
pub(super) fn harmonic_sums(y: &[f64], w: f64) -> [f64; 5] {
    let mut acc = [[0.0f64; LANES]; 5];
    let (step_sin, step_cos) = (LANES as f64 * w).sin_cos();
    for (block_idx, block) in y.chunks(RESYNC).enumerate() {
        let base = block_idx * RESYNC;
        let (mut c, mut s) = lane_phasors(w, base);
        let mut quads = block.chunks_exact(LANES);
        for quad in &mut quads {
            for lane in 0..LANES {
                let v = quad[lane];
                let (cl, sl) = (c[lane], s[lane]);
                acc[0][lane] += v * cl;
                acc[1][lane] += v * sl;
                acc[2][lane] += cl * cl;
                acc[3][lane] += sl * sl;
                acc[4][lane] += cl * sl;
                c[lane] = cl * step_cos - sl * step_sin;
                s[lane] = sl * step_cos + cl * step_sin;
            }
        }
        // A tail shorter than LANES (only in the last block) continues lane by lane.
        for (lane, &v) in quads.remainder().iter().enumerate() {
            let (cl, sl) = (c[lane], s[lane]);
            acc[0][lane] += v * cl;
            acc[1][lane] += v * sl;
            acc[2][lane] += cl * cl;
            acc[3][lane] += sl * sl;
            acc[4][lane] += cl * sl;
        }
    }
    acc.map(|lanes| lanes.iter().sum())
}

/// The exact phasors (cos, sin)(w j) of the `LANES` samples j = base, base + 1, ..., from which
/// the interleaved rotations of `harmonic_sums` and `subtract_lines` start each block.
fn lane_phasors(w: f64, base: usize) -> ([f64; LANES], [f64; LANES]) {
    let mut c = [0.0f64; LANES];
    let mut s = [0.0f64; LANES];
    for lane in 0..LANES {
        (s[lane], c[lane]) = (w * (base + lane) as f64).sin_cos();
    }
    (c, s)
}

/// Least-squares amplitude of a sinusoid at angular frequency `w` (rad per sample), and the
/// power it explains.
fn fit_at(y: &[f64], w: f64) -> (f64, f64, f64) {
    let [sc, ss, cc, s2, cs] = harmonic_sums(y, w);
    let det = cc.mul_add(s2, -(cs * cs));
    if !(det.abs() > 0.0) {
        return (0.0, 0.0, 0.0);
    }
    let a = sc.mul_add(s2, -(ss * cs)) / det;
    let b = ss.mul_add(cc, -(sc * cs)) / det;
    (a, b, a.mul_add(sc, b * ss))
}

/// -(power explained by a sinusoid) at f = centre + u step, as a function of u, for `BrentOpt`.
struct NegativeExplainedPower<'a> {
    y: &'a [f64],
    centre_hz: f64,
    step_hz: f64,
    sample_rate_hz: f64,
}

impl CostFunction for NegativeExplainedPower<'_> {
    type Param = f64;
    type Output = f64;

    fn cost(&self, u: &f64) -> Result<f64, argmin::core::Error> {
        let f = u.mul_add(self.step_hz, self.centre_hz);
        Ok(-fit_at(self.y, 2.0 * PI * f / self.sample_rate_hz).2)
    }
}

/// Fits the line nearest `f0_hz` within +-`half_width_hz`: the explained power is scanned on a
/// grid four times finer than the record's own resolution 1/T, then refined by Brent's method
/// around the best grid point. `y` must have its mean removed.
pub fn fit_line(y: &[f64], sample_rate_hz: f64, f0_hz: f64, half_width_hz: f64) -> SpectralLine {
    let n = y.len() as f64;
    let to_w = |f: f64| 2.0 * PI * f / sample_rate_hz;
    let step = sample_rate_hz / n / 4.0;
    let n_grid = ((2.0 * half_width_hz / step).ceil() as usize).clamp(1, 400);
    let lo = f0_hz - half_width_hz;
    let grid_step = 2.0 * half_width_hz / n_grid as f64;
    let mut best_f = f0_hz;
    let mut best_p = f64::NEG_INFINITY;
    for i in 0..=n_grid {
        let f = (i as f64).mul_add(grid_step, lo);
        if f <= 0.0 || f >= sample_rate_hz / 2.0 {
            continue;
        }
        let (_, _, p) = fit_at(y, to_w(f));
        if p > best_p {
            best_p = p;
            best_f = f;
        }
    }
    // Brent's method (parabolic interpolation safeguarded by golden sections) on
    // [best - grid_step, best + grid_step], in units of the grid step u = (f - best) / step,
    // down to about 3e-7 grid steps, i.e. 1e-7 of the resolution 1/T: the residual of a removed
    // line is then below 1e-6 of its amplitude. It needs about a third of the evaluations of the
    // golden-section search used before (10 against 32 in the off-grid test of spectrum::tests)
    // (Brent, Algorithms for Minimization without Derivatives (1973), ch. 5, as implemented by
    // argmin's `BrentOpt`).
    let problem = NegativeExplainedPower {
        y,
        centre_hz: best_f,
        step_hz: grid_step,
        sample_rate_hz,
    };
    let solver = BrentOpt::new(-1.0, 1.0).set_tolerance(f64::EPSILON.sqrt(), 1e-7);
    let refined = Executor::new(problem, solver)
        .configure(|state| state.max_iters(100))
        .run()
        .ok()
        .and_then(|result| {
            let state = result.state();
            Some((state.best_param?, state.best_cost))
        });
    let f = match refined {
        Some((u, cost)) if -cost >= best_p => u.mul_add(grid_step, best_f),
        _ => best_f,
    };
    let (ca, sb, _) = fit_at(y, to_w(f));
    SpectralLine {
        frequency_hz: f,
        amplitude: ca.hypot(sb),
        cos_coefficient: ca,
        sin_coefficient: sb,
    }
}

/// The least-squares sinusoid at exactly `f_hz`, with no search: for a line whose frequency is
/// known (a stage driven by a generator), searching would pick the frequency where the
/// background adds most and bias the line's power upward. `y` must have its mean removed.
pub fn line_at(y: &[f64], sample_rate_hz: f64, f_hz: f64) -> SpectralLine {
    let (a, b, _) = fit_at(y, 2.0 * PI * f_hz / sample_rate_hz);
    SpectralLine {
        frequency_hz: f_hz,
        amplitude: a.hypot(b),
        cos_coefficient: a,
        sin_coefficient: b,
    }
}

/// Subtracts fitted lines from `y` in place.
///
/// The phasor exp(i w j) advances by rotation, four interleaved phasors at a time, and is
/// recomputed exactly every `RESYNC` samples, as in `harmonic_sums`, instead of a `sin_cos` per
/// sample and line, which costs many times a rotation step (common practice for recursive
/// oscillators; the agreement with direct `sin_cos` is checked in the tests).
#[allow(clippy::suboptimal_flops)]
pub fn subtract_lines(y: &mut [f64], sample_rate_hz: f64, lines: &[SpectralLine]) {
    for line in lines {
        let w = 2.0 * PI * line.frequency_hz / sample_rate_hz;
        let (a, b) = (line.cos_coefficient, line.sin_coefficient);
        let (step_sin, step_cos) = (LANES as f64 * w).sin_cos();
        for (block_idx, block) in y.chunks_mut(RESYNC).enumerate() {
            let base = block_idx * RESYNC;
            let (mut c, mut s) = lane_phasors(w, base);
            for quad in block.chunks_mut(LANES) {
                for (lane, v) in quad.iter_mut().enumerate() {
                    let (cl, sl) = (c[lane], s[lane]);
                    *v -= a * cl + b * sl;
                    c[lane] = cl * step_cos - sl * step_sin;
                    s[lane] = sl * step_cos + cl * step_sin;
                }
            }
        }
    }
}
